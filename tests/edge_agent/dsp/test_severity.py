"""Velocity severity and ISO 10816-3 zones."""

import numpy as np
import pytest

from edge_agent.dsp.severity import (
    STANDARD_GRAVITY,
    ZONE_NUMBER,
    iso_10816_zone,
    velocity_rms,
    zone_boundaries,
)

FS = 25_600.0
T = np.arange(25_600) / FS


def test_standard_gravity():
    # ISO 80000-3 / CGPM 1901 (from memory).
    assert STANDARD_GRAVITY == 9.80665


def test_velocity_of_one_g_at_100_hz():
    # v = a / (2 pi f): 1 g peak at 100 Hz -> 15.61 mm/s peak, 11.04 mm/s RMS
    # (common practice; computed, REFERENCES.md).
    x = np.sin(2 * np.pi * 100.0 * T)
    v = velocity_rms(x, FS)
    assert v == pytest.approx(11.04, abs=0.005)
    assert v * np.sqrt(2) == pytest.approx(15.61, abs=0.005)


def test_velocity_band_excludes_lines_outside_10_to_1000_hz():
    # ISO 10816-3 measures 10-1000 Hz: a 5 Hz and a 2 kHz line do not count.
    x = np.sin(2 * np.pi * 100.0 * T) + 3 * np.sin(2 * np.pi * 5.0 * T)
    x += 3 * np.sin(2 * np.pi * 2000.0 * T)
    assert velocity_rms(x, FS) == pytest.approx(11.04, abs=0.005)


def test_velocity_of_two_lines_adds_in_power():
    x = np.sin(2 * np.pi * 100.0 * T) + np.sin(2 * np.pi * 200.0 * T)
    expected = np.hypot(11.0366, 11.0366 / 2)
    assert velocity_rms(x, FS) == pytest.approx(expected, rel=1e-3)
    np.testing.assert_allclose(
        velocity_rms(np.stack([x, 2 * x]), FS), [expected, 2 * expected], rtol=1e-3
    )


@pytest.mark.parametrize(
    ("group", "foundation", "bounds"),
    [
        # ISO 10816-3:2009 Annex A (secondary transcription), REFERENCES.md.
        (1, "rigid", (2.3, 4.5, 7.1)),
        (1, "flexible", (3.5, 7.1, 11.0)),
        (2, "rigid", (1.4, 2.8, 4.5)),
        (2, "flexible", (2.3, 4.5, 7.1)),
    ],
)
def test_iso_10816_3_zone_boundaries(group, foundation, bounds):
    assert zone_boundaries(machine_group=group, foundation=foundation) == bounds
    ab, bc, cd = bounds
    kw = {"machine_group": group, "foundation": foundation}
    assert iso_10816_zone(0.0, **kw) == "A"
    assert iso_10816_zone(ab, **kw) == "A"  # boundary belongs to the lower zone
    assert iso_10816_zone(ab + 0.01, **kw) == "B"
    assert iso_10816_zone(bc, **kw) == "B"
    assert iso_10816_zone(bc + 0.01, **kw) == "C"
    assert iso_10816_zone(cd, **kw) == "C"
    assert iso_10816_zone(cd + 0.01, **kw) == "D"


def test_zone_numbers():
    assert ZONE_NUMBER == {"A": 1, "B": 2, "C": 3, "D": 4}


def test_bad_input():
    with pytest.raises(ValueError, match="band must lie below fs/2 = 500 Hz"):
        velocity_rms(np.ones(1000), 1000.0)
    with pytest.raises(ValueError, match="fs must be a positive"):
        velocity_rms(np.ones(1000), -1.0)
    with pytest.raises(ValueError, match="x must not be empty"):
        velocity_rms([], FS)
    with pytest.raises(ValueError, match="x contains non-finite"):
        velocity_rms([0.0, np.inf, 0.0, 1.0], FS)
    with pytest.raises(ValueError, match="machine_group and foundation"):
        zone_boundaries(machine_group=3, foundation="rigid")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="velocity_mm_s"):
        iso_10816_zone(-1.0)
