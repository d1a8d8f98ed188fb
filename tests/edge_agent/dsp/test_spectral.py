"""Spectra and spectral indicators against scipy.signal, Parseval and closed forms."""

import numpy as np
import pytest
import scipy.signal

from edge_agent.dsp.spectral import (
    band_energies,
    compute_spectrum,
    dominant_peaks,
    spectral_centroid,
    spectral_entropy,
    welch_psd,
)

FS = 25_600.0
N = 25_600
T = np.arange(N) / FS


def test_hann_spectrum_equals_windowed_fft():
    # Reference: numpy.fft.rfft of x times scipy.signal.get_window("hann") (periodic).
    for n in (1000, 1001):
        x = np.random.default_rng(n).normal(size=n)
        spec = compute_spectrum(x, 1000.0)
        ref = np.fft.rfft(x * scipy.signal.get_window("hann", n))
        np.testing.assert_allclose(spec.hann, ref, atol=1e-10)


def test_welch_matches_scipy_and_parseval():
    # scipy reference implementation; Parseval: integral of PSD = variance.
    rng = np.random.default_rng(0)
    x = rng.normal(size=(2, 2**15)) * np.array([[1.0], [2.0]])
    f, p = welch_psd(x, FS, nperseg=512)
    fr, pr = scipy.signal.welch(x, fs=FS, nperseg=512)
    np.testing.assert_allclose(f, fr)
    np.testing.assert_allclose(p, pr)
    np.testing.assert_allclose(p.sum(axis=-1) * (f[1] - f[0]), x.var(axis=-1), rtol=0.02)


def test_band_energies_against_welch_and_parseval():
    # Coloured noise: band powers from one periodogram vs scipy.signal.welch integrated over
    # the same band (statistical agreement), and bands tiling 0..fs/2 sum to mean(x**2).
    rng = np.random.default_rng(1)
    b, a = scipy.signal.butter(2, [1000, 3000], btype="band", fs=FS)
    x = scipy.signal.lfilter(b, a, rng.normal(size=N)) + 0.1 * rng.normal(size=N)
    bands = [(500.0, 1500.0), (1500.0, 4000.0), (6000.0, 9000.0)]
    e = band_energies(x, FS, bands=bands)
    f, p = scipy.signal.welch(x, fs=FS, nperseg=1024)
    df = f[1] - f[0]
    for (lo, hi), ei in zip(bands, e, strict=True):
        sel = (f >= lo) & (f <= hi)
        assert ei == pytest.approx(p[sel].sum() * df, rel=0.1)
    tiling = [(0.0, 999.5), (1000.0, 5000.5), (5001.0, FS / 2)]
    assert band_energies(x, FS, bands=tiling).sum() == pytest.approx(np.mean(x**2), rel=1e-12)


def test_centroid_and_entropy():
    # A tone's centroid is its frequency; a tone has near-zero entropy, white noise near one.
    x = np.sin(2 * np.pi * 1234.0 * T)
    assert spectral_centroid(x, FS) == pytest.approx(1234.0, rel=1e-9)
    assert spectral_entropy(x, FS) < 0.01
    assert spectral_entropy(np.random.default_rng(0).normal(size=N), FS) > 0.9
    assert spectral_centroid(x, FS, band=(2000.0, 3000.0)) != pytest.approx(1234.0, rel=0.01)


def test_peak_frequency_shift_below_bin_width_is_resolved():
    # Bin width is 1 Hz; a 0.1 Hz (0.1 bin) shift must be measured to within 0.01 Hz.
    rng = np.random.default_rng(2)
    noise = 0.01 * rng.normal(size=N)
    f0 = dominant_peaks(np.sin(2 * np.pi * 100.0 * T) + noise, FS, n_peaks=1).frequencies_hz[0]
    f1 = dominant_peaks(np.sin(2 * np.pi * 100.1 * T) + noise, FS, n_peaks=1).frequencies_hz[0]
    assert f1 - f0 == pytest.approx(0.1, abs=0.01)
    for true in (100.25, 100.5, 100.73):
        p = dominant_peaks(0.7 * np.sin(2 * np.pi * true * T), FS, n_peaks=1)
        assert p.frequencies_hz[0] == pytest.approx(true, abs=0.005)
        assert p.amplitudes[0] == pytest.approx(0.7, rel=0.005)


def test_dominant_peaks_order_and_band():
    x = np.sin(2 * np.pi * 50.0 * T) + 3 * np.sin(2 * np.pi * 300.2 * T)
    x += 2 * np.sin(2 * np.pi * 700.6 * T)
    p = dominant_peaks(x, FS, n_peaks=3)
    np.testing.assert_allclose(p.frequencies_hz, [300.2, 700.6, 50.0], atol=0.01)
    q = dominant_peaks(x, FS, n_peaks=1, band=(400.0, 800.0))
    assert q.frequencies_hz[0] == pytest.approx(700.6, abs=0.01)


def test_bad_input():
    x = np.ones(1024)
    with pytest.raises(ValueError, match=r"bands\[0\] must lie below fs/2 = 512 Hz"):
        band_energies(x, 1024.0, bands=[(100.0, 600.0)])
    with pytest.raises(ValueError, match="bands must hold at least one"):
        band_energies(x, 1024.0, bands=[])
    with pytest.raises(ValueError, match="nperseg"):
        welch_psd(x, 1024.0, nperseg=4)
    with pytest.raises(ValueError, match="x is too short"):
        welch_psd(np.ones(100), 1024.0, nperseg=256)
    with pytest.raises(ValueError, match="window must be"):
        welch_psd(x, 1024.0, window="nonesuch")
    with pytest.raises(ValueError, match="fs must be a positive"):
        compute_spectrum(x, float("nan"))
    with pytest.raises(ValueError, match="x must not be empty"):
        dominant_peaks([], 1024.0)
    with pytest.raises(ValueError, match="n_peaks"):
        dominant_peaks(x, 1024.0, n_peaks=0)
    with pytest.raises(ValueError, match="band must be"):
        spectral_centroid(x, 1024.0, band=(300.0, 100.0))
