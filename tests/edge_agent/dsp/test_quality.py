"""Every quality flag raised by a crafted bad window; clean windows raise none."""

import numpy as np
import pytest

from edge_agent.dsp.quality import QUALITY_FLAGS, clean_window

FS = 25_600.0
N = 25_600


def _vibration(seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(N) / FS
    return 0.3 * np.sin(2 * np.pi * 29.5 * t) + 0.1 * rng.normal(size=N)


OPTS = {"dc_limit": 0.05, "drift_limit": 0.05, "full_scale": 5.0}


@pytest.mark.parametrize("seed", range(5))
def test_clean_windows_raise_no_flag(seed):
    x = _vibration(seed)
    cleaned, q = clean_window(x, FS, **OPTS)
    assert q.flags == frozenset()
    assert q.spikes_removed == 0
    assert q.usable
    np.testing.assert_array_equal(cleaned, x)


def test_clean_pressure_window_raises_no_flag():
    rng = np.random.default_rng(3)
    t = np.arange(1000) / 1000.0
    p = 450.0 + 4.0 * np.sin(2 * np.pi * 177.0 * t) + rng.normal(size=1000)
    _, q = clean_window(p, 1000.0)
    assert q.flags == frozenset()


def test_clipping_at_the_rails():
    x = np.clip(_vibration() * 3, -0.9, 0.9)
    _, q = clean_window(x, FS)
    assert "clipped" in q.flags
    assert q.usable


def test_clipping_at_configured_full_scale():
    x = _vibration()
    x[1000] = 5.0
    x[1001] = 4.2
    _, q = clean_window(x, FS, full_scale=5.0)
    assert "clipped" in q.flags


def test_flatline_by_std():
    _, q = clean_window(np.full(N, 0.013), FS)
    assert "flatline" in q.flags
    assert not q.usable


def test_flatline_by_stuck_run():
    x = _vibration()
    x[5000:9000] = x[5000]  # stuck for 0.16 s
    _, q = clean_window(x, FS)
    assert "flatline" in q.flags
    assert not q.usable


def test_short_dropout_is_filled_and_flagged():
    x = _vibration()
    x[300:310] = np.nan
    cleaned, q = clean_window(x, FS)
    assert "dropout" in q.flags
    assert q.usable
    assert np.isfinite(cleaned).all()
    np.testing.assert_allclose(cleaned[300:310], np.linspace(x[299], x[310], 12)[1:-1])
    assert q.dropout_fraction == pytest.approx(10 / N)


def test_long_dropout_makes_window_unusable():
    x = _vibration()
    x[1000:12000] = np.nan
    _, q = clean_window(x, FS)
    assert "dropout" in q.flags
    assert not q.usable


def test_all_missing():
    cleaned, q = clean_window(np.full(100, np.nan), 100.0)
    assert {"dropout", "flatline"} <= q.flags
    assert not q.usable
    assert np.isnan(cleaned).all()


def test_spikes_are_removed_and_counted():
    x = _vibration()
    spikes = [500, 7000, 20_000]
    clean = x.copy()
    x[spikes] += np.array([3.0, -4.0, 2.5])
    cleaned, q = clean_window(x, FS)
    assert "spikes_removed" in q.flags
    assert q.spikes_removed == 3
    assert np.abs(cleaned[spikes] - clean[spikes]).max() < 0.5


def test_genuine_ringing_impacts_are_kept():
    # A resonance excited by periodic impacts (what a bearing defect looks like) is not a spike.
    rng = np.random.default_rng(4)
    t = np.arange(N) / FS
    ring = np.exp(-1500 * t[:300]) * np.sin(2 * np.pi * 4000 * t[:300])
    impacts = np.convolve((np.arange(N) % 240 == 0) * 2.0, ring)[:N]
    x = impacts + 0.05 * rng.normal(size=N)
    cleaned, q = clean_window(x, FS)
    assert q.spikes_removed == 0
    np.testing.assert_array_equal(cleaned, x)


def test_dc_offset():
    _, q = clean_window(_vibration() + 0.2, FS, dc_limit=0.05)
    assert q.flags == {"dc_offset"}


def test_drift_and_linear_detrend():
    t = np.arange(N) / FS
    x = _vibration() + 0.3 * t
    cleaned, q = clean_window(x, FS, drift_limit=0.05, detrend="linear")
    assert "drift" in q.flags
    # The cleaned window has neither mean nor slope left.
    assert abs(cleaned.mean()) < 1e-12
    assert abs(np.polyfit(t, cleaned, 1)[0]) < 1e-9


def test_every_flag_is_reachable():
    raised: set[str] = set()
    x = np.clip(_vibration() * 3 + 0.2 + 0.5 * np.arange(N) / FS, -0.9, 0.9)
    x[300] = np.nan
    x[7000] += 5.0
    raised |= clean_window(x, FS, dc_limit=0.05, drift_limit=0.05)[1].flags
    raised |= clean_window(np.zeros(N), FS)[1].flags
    assert raised == set(QUALITY_FLAGS)


def test_bad_input():
    with pytest.raises(ValueError, match="x must not be empty"):
        clean_window([], FS)
    with pytest.raises(ValueError, match="x is too short"):
        clean_window([1.0, 2.0], FS)
    with pytest.raises(ValueError, match="fs must be a positive"):
        clean_window(np.ones(100), 0.0)
    with pytest.raises(ValueError, match="x must be one-dimensional"):
        clean_window(np.ones((2, 100)), FS)
    with pytest.raises(ValueError, match="detrend must be one of"):
        clean_window(np.ones(100), FS, detrend="cubic")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="max_dropout_fraction"):
        clean_window(np.ones(100), FS, max_dropout_fraction=2.0)
