"""Bearing defect frequencies against published multiples of shaft speed."""

import pytest

from edge_agent.dsp.bearing import defect_frequencies

INCH = 25.4


def test_cwru_drive_end_multiples():
    # CWRU Bearing Data Center, bearing information page (secondary transcription; REFERENCES.md):
    # BPFI 5.4152, BPFO 3.5848, FTF 0.39828, rolling element 4.7135 = 2 x BSF.
    f = defect_frequencies(1.0, n_elements=9, element_diameter=0.3126, pitch_diameter=1.537)
    assert f.bpfi == pytest.approx(5.4152, abs=1e-4)
    assert f.bpfo == pytest.approx(3.5848, abs=1e-4)
    assert f.ftf == pytest.approx(0.39828, abs=5e-5)  # published value is rounded
    assert 2 * f.bsf == pytest.approx(4.7135, abs=1e-4)


def test_cwru_drive_end_at_1780_rpm():
    # Computed in REFERENCES.md: FTF 11.82, BSF 69.92, BPFO 106.35, BPFI 160.65 Hz.
    f = defect_frequencies(1780 / 60, n_elements=9, element_diameter=0.3126, pitch_diameter=1.537)
    assert (f.ftf, f.bsf, f.bpfo, f.bpfi) == pytest.approx((11.82, 69.92, 106.35, 160.65), abs=0.01)


def test_cwru_fan_end_multiples():
    # CWRU fan end (secondary; geometry from memory): BPFI 4.9469, BPFO 3.0530, FTF 0.3817,
    # rolling element 3.9874 (= 2 x BSF).
    f = defect_frequencies(1.0, n_elements=8, element_diameter=0.2656, pitch_diameter=1.122)
    assert f.bpfi == pytest.approx(4.9469, abs=1e-3)
    assert f.bpfo == pytest.approx(3.0530, abs=1e-3)
    assert f.ftf == pytest.approx(0.3817, abs=1e-3)
    assert 2 * f.bsf == pytest.approx(3.9874, abs=1e-3)


def test_curtin_data_sheet_multiples():
    # Curtin University bearing data sheet (2012), readme (secondary): FTF 0.3969, BPFO 3.572,
    # BPFI 5.428, BSF 2.32.
    f = defect_frequencies(1.0, n_elements=9, element_diameter=7.9375, pitch_diameter=38.50)
    assert f.ftf == pytest.approx(0.3969, abs=5e-4)
    assert f.bpfo == pytest.approx(3.572, abs=1e-3)
    assert f.bpfi == pytest.approx(5.428, abs=1e-3)
    assert f.bsf == pytest.approx(2.32, abs=0.01)


def test_ims_rig_frequencies_at_2000_rpm():
    # Qiu et al., J. Sound Vib. 289 (2006) 1066-1090 (values from memory, REFERENCES.md):
    # BPFO 236.4, BPFI 296.9, 2 x BSF 279.8, FTF 14.8 Hz. Units do not matter (inches here).
    f = defect_frequencies(
        2000 / 60,
        n_elements=16,
        element_diameter=0.331 * INCH,
        pitch_diameter=2.815 * INCH,
        contact_angle_deg=15.17,
    )
    assert f.bpfo == pytest.approx(236.4, abs=0.1)
    assert f.bpfi == pytest.approx(296.9, abs=0.1)
    assert 2 * f.bsf == pytest.approx(279.8, abs=0.1)
    assert f.ftf == pytest.approx(14.8, abs=0.05)


def test_bad_geometry():
    with pytest.raises(ValueError, match="element_diameter must be smaller"):
        defect_frequencies(1.0, n_elements=9, element_diameter=2.0, pitch_diameter=1.0)
    with pytest.raises(ValueError, match="n_elements"):
        defect_frequencies(1.0, n_elements=2, element_diameter=0.3, pitch_diameter=1.5)
    with pytest.raises(ValueError, match="shaft_hz"):
        defect_frequencies(0.0, n_elements=9, element_diameter=0.3, pitch_diameter=1.5)
    with pytest.raises(ValueError, match="contact_angle_deg"):
        defect_frequencies(
            1.0, n_elements=9, element_diameter=0.3, pitch_diameter=1.5, contact_angle_deg=90
        )
