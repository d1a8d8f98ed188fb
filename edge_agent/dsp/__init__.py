"""Signal core of the gateway: pure functions over numpy arrays (no I/O, no state).

Inner products use ``numpy.einsum`` rather than ``numpy.dot``/``@``: those dispatch to a
multi-threaded BLAS, whose threads spin against the gateway's other processes on a small CPU
(measured here: one asset-window took 135 ms instead of 12 ms under load).

Modules: :mod:`~edge_agent.dsp.quality` (data-quality checks and cleaning),
:mod:`~edge_agent.dsp.time_domain`, :mod:`~edge_agent.dsp.severity` (velocity, ISO 10816-3),
:mod:`~edge_agent.dsp.spectral`, :mod:`~edge_agent.dsp.speed`, :mod:`~edge_agent.dsp.bearing`,
:mod:`~edge_agent.dsp.envelope` and :mod:`~edge_agent.dsp.process`.
"""

from edge_agent.dsp.bearing import DefectFrequencies, defect_frequencies
from edge_agent.dsp.envelope import (
    EnvelopeSpectrum,
    SelectedBand,
    analytic_envelope,
    line_levels_db,
    select_band,
    spectral_kurtosis,
    squared_envelope_spectrum,
)
from edge_agent.dsp.process import (
    high_band_rms,
    pressure_mean,
    pressure_ripple,
    pulsation_amplitude,
)
from edge_agent.dsp.quality import QUALITY_FLAGS, QualityResult, clean_window
from edge_agent.dsp.severity import (
    STANDARD_GRAVITY,
    ZONE_NUMBER,
    iso_10816_zone,
    velocity_rms,
    zone_boundaries,
)
from edge_agent.dsp.spectral import (
    Peaks,
    Spectrum,
    band_energies,
    compute_spectrum,
    dominant_peaks,
    spectral_centroid,
    spectral_entropy,
    welch_psd,
)
from edge_agent.dsp.speed import order_amplitudes, speed_from_spectrum, speed_from_tacho
from edge_agent.dsp.time_domain import (
    TimeDomainSummary,
    crest_factor,
    impulse_factor,
    kurtosis,
    peak,
    peak_to_peak,
    rms,
    shape_factor,
    skewness,
    summarise,
)

__all__ = [
    "QUALITY_FLAGS",
    "STANDARD_GRAVITY",
    "ZONE_NUMBER",
    "DefectFrequencies",
    "EnvelopeSpectrum",
    "Peaks",
    "QualityResult",
    "SelectedBand",
    "Spectrum",
    "TimeDomainSummary",
    "analytic_envelope",
    "band_energies",
    "clean_window",
    "compute_spectrum",
    "crest_factor",
    "defect_frequencies",
    "dominant_peaks",
    "high_band_rms",
    "impulse_factor",
    "iso_10816_zone",
    "kurtosis",
    "line_levels_db",
    "order_amplitudes",
    "peak",
    "peak_to_peak",
    "pressure_mean",
    "pressure_ripple",
    "pulsation_amplitude",
    "rms",
    "select_band",
    "shape_factor",
    "skewness",
    "spectral_centroid",
    "spectral_entropy",
    "spectral_kurtosis",
    "speed_from_spectrum",
    "speed_from_tacho",
    "squared_envelope_spectrum",
    "summarise",
    "velocity_rms",
    "welch_psd",
    "zone_boundaries",
]
