"""Real data: the IMS bearing run-to-failure test, 2nd test (outer-race failure of bearing 1).

Data: J. Lee, H. Qiu, G. Yu, J. Lin, and Rexnord Technical Services (2007), IMS, University of
Cincinnati, "Bearing Data Set", NASA Ames Prognostics Data Repository; records and provenance in
tests/data/ims-2nd-test/README.md. fs = 20,480 Hz assumed (see that README). Published defect
frequency: BPFO 236.4 Hz at 2000 rpm (Qiu et al., J. Sound Vib. 289 (2006) 1066-1090; from
memory, consistent with the geometry). The two records after 06:02:39 are left out (rig stopped).
"""

from pathlib import Path

import numpy as np
import pytest

from edge_agent.dsp.bearing import defect_frequencies
from edge_agent.dsp.envelope import line_levels_db, select_band, squared_envelope_spectrum
from edge_agent.dsp.quality import clean_window
from edge_agent.dsp.time_domain import summarise

DATA = Path(__file__).resolve().parents[2] / "data" / "ims-2nd-test"
FS = 20_480.0
INCH = 25.4
FEB17 = "2004.02.17.07.12.39"
FEB16 = "2004.02.16.04.32.39"
FEB19 = ["2004.02.19.05.32.39", "2004.02.19.05.42.39", "2004.02.19.05.52.39", "2004.02.19.06.02.39"]


def _bearing(record: str, column: int) -> np.ndarray:
    path = DATA / f"{record}.npy"
    if not path.exists():
        path = DATA / "bearing1-only" / f"{record}.npy"
    return np.load(path)[:, column].astype(float)


def _bpfo() -> float:
    f = defect_frequencies(
        2000 / 60,
        n_elements=16,
        element_diameter=0.331 * INCH,
        pitch_diameter=2.815 * INCH,
        contact_angle_deg=15.17,
    )
    return f.bpfo


def _bpfo_line(x: np.ndarray) -> tuple[float, float]:
    """(frequency of the largest envelope line within BPFO +-1 %, its level over the floor dB)."""
    cleaned, q = clean_window(x, FS, detrend="linear")
    assert q.usable
    band = select_band(cleaned, FS, min_bandwidth_hz=1000.0, f_range=(1000.0, FS / 2))
    ses = squared_envelope_spectrum(cleaned, FS, band=(band.low_hz, band.high_hz), fmax=1000.0)
    bpfo = _bpfo()
    sel = np.abs(ses.freqs - bpfo) <= 0.01 * bpfo
    f_peak = float(ses.freqs[sel][np.argmax(ses.amplitude[sel])])
    level = float(line_levels_db(ses, lines_hz=[bpfo], tolerance=0.01)[0])
    return f_peak, level


def test_published_bpfo_from_geometry():
    assert _bpfo() == pytest.approx(236.4, abs=0.1)


@pytest.mark.parametrize("record", [FEB17, *FEB19])
def test_bearing1_shows_bpfo_line_far_above_neighbours(record):
    f_peak, level = _bpfo_line(_bearing(record, 0))
    assert f_peak == pytest.approx(236.4, rel=0.01)
    assert level > 18.0  # > x8 in amplitude over the median of the neighbouring bins


@pytest.mark.parametrize("record", [FEB16, FEB17])
def test_bearing3_shows_no_bpfo_line(record):
    _, level = _bpfo_line(_bearing(record, 1))
    assert level < 12.0


def test_bearing1_rms_and_kurtosis_rise_towards_the_end():
    first = summarise(clean_window(_bearing(FEB16, 0), FS, detrend="linear")[0])
    last = [summarise(clean_window(_bearing(r, 0), FS, detrend="linear")[0]) for r in FEB19]
    assert first.rms == pytest.approx(0.0827, abs=0.002)  # fixture README table
    assert min(s.rms for s in last) > 4 * first.rms
    assert max(s.kurtosis for s in last) > 2 * first.kurtosis
    assert np.median([s.kurtosis for s in last]) > first.kurtosis
