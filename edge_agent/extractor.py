"""The extractor: one asset's window set in, one indicator message out.

Per channel: quality check and cleaning (:func:`edge_agent.dsp.quality.clean_window`), then the
channel kind's indicators from the cleaned samples, sharing one real FFT per window across every
spectral indicator. Across channels: the operating condition (shaft speed from tacho, else from
the vibration spectrum, else the drive's value, else the nominal speed; load, suction pressure,
fluid temperature, flow).

Indicator names are ``{channel}.{quantity}``; each name's unit and wire encoding sit beside it
in the :class:`~shared_schema.IndicatorLayout`, so one name never changes its unit. A channel
that is flatline, mostly dropped or absent gives ``None`` (missing) for all its indicators, never
a stand-in number; channels with other findings (clipping, spikes, a short dropout, offset,
drift) still get indicators from the cleaned data, with the flags in the message. When the shaft
speed lies outside the asset's speed range (by more than 1 %), the accelerometer channels, whose
order and defect-line indicators depend on the speed, carry the ``out_of_regime`` flag.

The default layout of a six-channel pump (two accelerometers, two pressures, current,
temperature) encodes to about 130 bytes; :data:`ACCEL_QUANTITIES` lists what else an
accelerometer channel can carry through ``accel_quantities``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal
from uuid import UUID, uuid4

import numpy as np
import numpy.typing as npt

from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig
from edge_agent.dsp.envelope import _line_levels, _select_band_core, _ses_from_spectrum
from edge_agent.dsp.process import _high_band_from_spectrum
from edge_agent.dsp.quality import QualityResult, clean_window
from edge_agent.dsp.severity import ZONE_NUMBER, _velocity_rms_from_spectrum, iso_10816_zone
from edge_agent.dsp.spectral import (
    Spectrum,
    _centroid_from_spectrum,
    _dominant_peaks_from_spectrum,
    _spectrum,
    _tone_rms_from_spectrum,
)
from edge_agent.dsp.speed import (
    _order_velocity_from_spectrum,
    _speed_from_spectrum,
    speed_from_tacho,
)
from edge_agent.dsp.time_domain import _summarise
from edge_agent.windows import ChannelWindow, WindowSet
from shared_schema import (
    ChannelQuality,
    ClockSync,
    IndicatorLayout,
    IndicatorMessage,
    IndicatorSpec,
    OperatingCondition,
    QualityFlag,
    ShaftSpeedSource,
)

__all__ = [
    "ACCEL_QUANTITIES",
    "DEFAULT_ACCEL_QUANTITIES",
    "EXTRACTOR_VERSION",
    "ExtractionResult",
    "Extractor",
]

EXTRACTOR_VERSION = "1.0"

Encoding = Literal["f32", "f16"]
FloatArray = npt.NDArray[np.floating[Any]]

ACCEL_QUANTITIES: dict[str, tuple[str, Encoding]] = {
    "rms": ("g", "f16"),
    "peak": ("g", "f16"),
    "crest_factor": ("1", "f16"),
    "kurtosis": ("1", "f16"),
    "skewness": ("1", "f16"),
    "velocity_rms": ("mm/s", "f16"),
    "iso_zone": ("1", "f16"),
    "order_1x": ("mm/s", "f16"),
    "order_2x": ("mm/s", "f16"),
    "order_3x": ("mm/s", "f16"),
    "vane_pass": ("mm/s", "f16"),
    "env_bpfo": ("dB", "f16"),
    "env_bpfi": ("dB", "f16"),
    "env_bsf": ("dB", "f16"),
    "env_ftf": ("dB", "f16"),
    "high_band_rms": ("g", "f16"),
    "spectral_centroid": ("Hz", "f32"),
    "peak_frequency": ("Hz", "f32"),
}
"""Every quantity an accelerometer channel can carry: unit and wire encoding.

rms, peak: g (cleaned, trend removed). crest_factor, kurtosis (Pearson), skewness: 1.
velocity_rms: mm/s r.m.s., 10-1000 Hz. iso_zone: ISO 10816-3 zone 1..4 for A..D.
order_1x/2x/3x, vane_pass: velocity r.m.s. (mm/s) of the line at that multiple of shaft speed
(vane_pass = vane count x shaft rate). env_bpfo/bpfi/bsf/ftf: level of the squared-envelope
spectrum line at that defect frequency of the channel's bearing over the local floor, dB (bsf:
the larger of the lines at BSF and 2 x BSF). high_band_rms: g r.m.s. in the high band
(cavitation). spectral_centroid: Hz. peak_frequency: interpolated frequency of the largest
acceleration line in the velocity band, Hz.
"""

DEFAULT_ACCEL_QUANTITIES: tuple[str, ...] = (
    "rms",
    "crest_factor",
    "kurtosis",
    "velocity_rms",
    "iso_zone",
    "order_1x",
    "order_2x",
    "vane_pass",
    "env_bpfo",
    "env_bpfi",
    "env_bsf",
    "env_ftf",
    "high_band_rms",
)
"""The default accelerometer set, kept small so the encoded message stays near 140 bytes."""

_PRESSURE_QUANTITIES: tuple[tuple[str, Encoding], ...] = (
    ("mean", "f32"),
    ("ripple", "f16"),
    ("vane_pass", "f16"),
)
_ENV_NAMES = ("env_bpfo", "env_bpfi", "env_bsf", "env_ftf")
_F16_MAX = 65504.0
_MIN_SAMPLES = 8  # shortest channel window the quality check accepts
_DRIVE_KEYS = ("drive_speed_rpm", "shaft_speed_hz")
_REGIME_TOLERANCE = 0.01  # speed may exceed the configured range by 1 % before it is flagged
_SPEED_MARGIN = 0.05  # spectrum search margin around the speed range without a drive value
_DRIVE_MARGIN = 0.03  # spectrum search margin around the drive's speed (slip, drive accuracy)


@dataclass(frozen=True, slots=True)
class ExtractionResult:
    """Everything one window set gave, before it is packed into a message.

    Attributes
    ----------
    asset_id : str
    window_start : datetime
        Start of the windows (UTC, as received).
    window_s : float
        Longest channel window, s.
    values : Mapping[str, float | None]
        Indicator values by name, in layout order; None is missing.
    quality : Mapping[str, ChannelQuality]
        Quality of every configured channel (also those without findings).
    operating : OperatingCondition
    out_of_regime : bool
        The shaft speed lies outside the asset's speed range (then accelerometer channels also
        carry the ``out_of_regime`` flag).
    envelope_bands : Mapping[str, tuple[float, float]]
        Band-pass chosen for envelope analysis per accelerometer channel, Hz.
    """

    asset_id: str
    window_start: datetime
    window_s: float
    values: Mapping[str, float | None]
    quality: Mapping[str, ChannelQuality]
    operating: OperatingCondition
    out_of_regime: bool
    envelope_bands: Mapping[str, tuple[float, float]]


@dataclass(frozen=True, slots=True)
class _Speed:
    hz: float
    source: ShaftSpeedSource


def _finite_or_none(v: float, encoding: Encoding) -> float | None:
    if not math.isfinite(v):
        return None
    if encoding == "f16" and abs(v) > _F16_MAX:
        return None  # not representable on the wire; missing rather than a clamped number
    return float(v)


class Extractor:
    """Turns one asset's window set into one indicator message.

    Parameters
    ----------
    asset : AssetConfig
        The asset and its channels. Accelerometer channels must be in g; a channel's
        ``bearing`` names the bearing whose defect lines its envelope indicators track.
    accel_quantities : sequence of str, optional
        Quantities per accelerometer channel, a subset of :data:`ACCEL_QUANTITIES`, in this
        order; default :data:`DEFAULT_ACCEL_QUANTITIES`.
    velocity_band : (low, high)
        Band of the velocity severity, Hz (ISO 10816-3: 10-1000 Hz).
    high_band : (low, high)
        Cavitation band, Hz; its upper edge is lowered to 0.95 fs/2 for channels sampled too
        slowly (e.g. 11 kHz becomes 9.73 kHz at 20.48 kHz).
    slip_tolerance : float
        Relative search half-width around each defect frequency (rolling elements slip 1-2 %).
    sk_nperseg : int
        Frame length of the short-time transform used to pick the envelope band.
    envelope_min_bandwidth_hz : float
        Narrowest envelope band, Hz.
    envelope_min_hz : float
        Lowest frequency the envelope band may start at, Hz (keeps the shaft harmonics out).
    full_scale : mapping of channel name to float, optional
        Acquisition input range per channel (channel unit) for the clipping check.
    spike_threshold : float
        Spike threshold of the quality check (robust standard deviations).
    dc_limit_g, drift_limit_g : float
        Offset and drift (over one window) an accelerometer may show before it is flagged, g.
    """

    def __init__(
        self,
        asset: AssetConfig,
        *,
        accel_quantities: Sequence[str] | None = None,
        velocity_band: tuple[float, float] = (10.0, 1000.0),
        high_band: tuple[float, float] = (5000.0, 11000.0),
        slip_tolerance: float = 0.015,
        sk_nperseg: int = 64,
        envelope_min_bandwidth_hz: float = 1000.0,
        envelope_min_hz: float = 1000.0,
        full_scale: Mapping[str, float] | None = None,
        spike_threshold: float = 12.0,
        dc_limit_g: float = 0.1,
        drift_limit_g: float = 0.1,
    ) -> None:
        quantities = tuple(
            DEFAULT_ACCEL_QUANTITIES if accel_quantities is None else accel_quantities
        )
        unknown = [q for q in quantities if q not in ACCEL_QUANTITIES]
        if unknown or not quantities or len(set(quantities)) != len(quantities):
            raise ValueError(
                "accel_quantities must be distinct names from "
                f"{sorted(ACCEL_QUANTITIES)}, got {list(quantities)!r}"
            )
        for name, band in (("velocity_band", velocity_band), ("high_band", high_band)):
            lo, hi = band
            if not 0 < lo < hi:
                raise ValueError(f"{name} must be (low, high) with 0 < low < high, got {band!r}")
        if int(sk_nperseg) != sk_nperseg or sk_nperseg < 8 or sk_nperseg % 2:
            raise ValueError(f"sk_nperseg must be an even integer >= 8, got {sk_nperseg!r}")
        for name, value in (
            ("envelope_min_bandwidth_hz", envelope_min_bandwidth_hz),
            ("envelope_min_hz", envelope_min_hz),
        ):
            if not (math.isfinite(value) and value >= 0):
                raise ValueError(f"{name} must be finite and >= 0, got {value!r}")
        if not 0.0 <= slip_tolerance < 0.2:
            raise ValueError(f"slip_tolerance must be in [0, 0.2), got {slip_tolerance!r}")
        full_scale = dict(full_scale or {})
        names = {c.name for c in asset.channels}
        if set(full_scale) - names:
            raise ValueError(
                f"full_scale names channels {sorted(set(full_scale) - names)} that the asset "
                f"{asset.asset_id!r} does not have; its channels are {sorted(names)}"
            )
        for c in asset.channels:
            if c.kind == "accel" and c.unit != "g":
                raise ValueError(
                    f"accelerometer channel {c.name!r} must be in 'g', got unit {c.unit!r}"
                )
        self.asset = asset
        self.accel_quantities = quantities
        self.velocity_band = (float(velocity_band[0]), float(velocity_band[1]))
        self.high_band = (float(high_band[0]), float(high_band[1]))
        self.slip_tolerance = float(slip_tolerance)
        self.sk_nperseg = int(sk_nperseg)
        self.envelope_min_bandwidth_hz = float(envelope_min_bandwidth_hz)
        self.envelope_min_hz = float(envelope_min_hz)
        self.full_scale = full_scale
        self.spike_threshold = float(spike_threshold)
        self.dc_limit_g = float(dc_limit_g)
        self.drift_limit_g = float(drift_limit_g)
        self._layout = self._build_layout()
        self._encodings = {s.name: s.encoding for s in self._layout.indicators}
        # Defect lines per bearing as multiples of shaft rate: ftf, bsf, 2 bsf, bpfo, bpfi.
        self._multiples = {key: _defect_multiples(g) for key, g in asset.bearings.items()}
        self._needs_envelope = any(q in _ENV_NAMES for q in quantities)
        wanted = set(quantities)
        self._needs_orders = bool(wanted & {"order_1x", "order_2x", "order_3x", "vane_pass"})
        self._needs_high_band = "high_band_rms" in wanted
        self._needs_centroid = "spectral_centroid" in wanted
        self._needs_peak = "peak_frequency" in wanted

    def __repr__(self) -> str:
        return (
            f"Extractor(asset_id={self.asset.asset_id!r}, version={EXTRACTOR_VERSION!r}, "
            f"indicators={len(self._layout.indicators)}, digest={self._layout.digest!r})"
        )

    # ------------------------------------------------------------------ layout
    def _build_layout(self) -> IndicatorLayout:
        specs: list[IndicatorSpec] = []
        for c in self.asset.channels:
            for quantity, unit, encoding in self._channel_quantities(c):
                specs.append(
                    IndicatorSpec(
                        name=f"{c.name}.{quantity}", unit=unit, channel=c.name, encoding=encoding
                    )
                )
        if not specs:
            raise ValueError(
                f"asset {self.asset.asset_id!r} has no channel that gives indicators "
                "(accel, pressure, current or temperature)"
            )
        return IndicatorLayout(extractor_version=EXTRACTOR_VERSION, indicators=tuple(specs))

    def _channel_quantities(self, c: ChannelConfig) -> list[tuple[str, str, Encoding]]:
        if c.kind == "accel":
            return [(q, *ACCEL_QUANTITIES[q]) for q in self.accel_quantities]
        if c.kind == "pressure":
            return [(q, c.unit, enc) for q, enc in _PRESSURE_QUANTITIES]
        if c.kind == "current":
            return [("rms", c.unit, "f16")]
        if c.kind == "temperature":
            return [("mean", c.unit, "f16")]
        return []  # tacho: feeds the operating condition only

    @property
    def layout(self) -> IndicatorLayout:
        """The indicator layout every message of this extractor refers to."""
        return self._layout

    # ------------------------------------------------------------------ extraction
    def compute(self, window_set: WindowSet) -> ExtractionResult:
        """Compute every indicator, the channels' quality and the operating condition.

        Raises
        ------
        ValueError
            If the window set belongs to another asset, or a channel's kind differs from the
            asset configuration.
        """
        if window_set.asset_id != self.asset.asset_id:
            raise ValueError(
                f"window_set is for asset {window_set.asset_id!r}, this extractor serves "
                f"{self.asset.asset_id!r}"
            )
        cleaned: dict[str, tuple[FloatArray, QualityResult, ChannelWindow]] = {}
        flags: dict[str, set[QualityFlag]] = {c.name: set() for c in self.asset.channels}
        spikes: dict[str, int] = dict.fromkeys(flags, 0)
        for c in self.asset.channels:
            w = window_set.channels.get(c.name)
            if w is None:
                flags[c.name].add(QualityFlag.DROPOUT)
                continue
            if w.kind != c.kind:
                raise ValueError(
                    f"channel {c.name!r} in the window set is of kind {w.kind!r}, "
                    f"the asset configures {c.kind!r}"
                )
            if c.kind == "tacho":
                continue
            if np.ndim(w.samples) != 1 or np.size(w.samples) < _MIN_SAMPLES:
                flags[c.name].add(QualityFlag.DROPOUT)  # nothing usable arrived
                continue
            x, q = self._clean(c, w)
            cleaned[c.name] = (x, q, w)
            flags[c.name].update(QualityFlag(f) for f in q.flags)
            spikes[c.name] = q.spikes_removed

        # One spectrum per accelerometer window, shared by speed and every spectral indicator.
        spectra = {
            name: _spectrum(x, w.fs)
            for name, (x, q, w) in cleaned.items()
            if q.usable and w.kind == "accel" and x.size >= 16
        }
        speed = self._shaft_speed(window_set, spectra)
        lo_rpm, hi_rpm = self.asset.speed_range_rpm
        rpm = speed.hz * 60.0
        out_of_regime = not (
            lo_rpm * (1 - _REGIME_TOLERANCE) <= rpm <= hi_rpm * (1 + _REGIME_TOLERANCE)
        )

        values: dict[str, float | None] = dict.fromkeys(self._layout.names)
        bands: dict[str, tuple[float, float]] = {}
        current_rms: float | None = None
        suction_kpa: float | None = None
        for c in self.asset.channels:
            if c.name not in cleaned:
                continue
            x, q, w = cleaned[c.name]
            if not q.usable:
                continue
            if c.kind == "accel":
                if c.name not in spectra:
                    continue  # too short for a spectrum: the channel's values stay missing
                if out_of_regime:
                    flags[c.name].add(QualityFlag.OUT_OF_REGIME)
                computed, band = self._accel(c, x, spectra[c.name], speed.hz)
                if band is not None:
                    bands[c.name] = band
            elif c.kind == "pressure":
                computed = self._pressure(x, w.fs, speed.hz)
                if c.name.startswith("suction") and c.unit == "kPa":
                    suction_kpa = computed["mean"]
            elif c.kind == "current":
                computed = {"rms": float(np.sqrt(np.mean(x * x)))}
                current_rms = computed["rms"]
            elif c.kind == "temperature":
                computed = {"mean": float(np.mean(x))}
            else:
                continue
            for quantity, v in computed.items():
                name = f"{c.name}.{quantity}"
                if name in values:
                    values[name] = _finite_or_none(v, self._encodings[name])

        operating = self._operating(window_set, speed, current_rms, suction_kpa)
        quality = {
            name: ChannelQuality(channel=name, flags=frozenset(f), spikes_removed=spikes[name])
            for name, f in flags.items()
        }
        # Without any window the configured length stands in: it is what was asked for.
        window_s = max(
            (w.duration_s for w in window_set.channels.values() if w.duration_s > 0),
            default=max(c.window_s for c in self.asset.channels),
        )
        return ExtractionResult(
            asset_id=self.asset.asset_id,
            window_start=window_set.start,
            window_s=window_s,
            values=values,
            quality=quality,
            operating=operating,
            out_of_regime=out_of_regime,
            envelope_bands=bands,
        )

    def extract(
        self,
        window_set: WindowSet,
        *,
        gateway_id: str,
        site: str,
        sequence: int,
        clock_sync: ClockSync = ClockSync.SYNCED,
        message_id: UUID | None = None,
    ) -> IndicatorMessage:
        """Compute the indicators of ``window_set`` and pack them into a message.

        The window start is truncated to whole milliseconds (the wire's resolution).

        Raises
        ------
        ValueError
            As :meth:`compute`, or when the message does not validate (e.g. a naive
            ``window_set.start``; pydantic's ``ValidationError`` is a ``ValueError``).
        """
        result = self.compute(window_set)
        start = window_set.start
        start = start.replace(microsecond=start.microsecond - start.microsecond % 1000)
        return IndicatorMessage(
            message_id=message_id if message_id is not None else uuid4(),
            gateway_id=gateway_id,
            sequence=sequence,
            site=site,
            asset_id=self.asset.asset_id,
            window_start=start,
            window_s=result.window_s,
            clock_sync=clock_sync,
            operating=result.operating,
            quality=tuple(result.quality.values()),
            layout_digest=self._layout.digest,
            values=tuple(result.values.values()),
        )

    # ------------------------------------------------------------------ per channel
    def _clean(self, c: ChannelConfig, w: ChannelWindow) -> tuple[FloatArray, QualityResult]:
        vibration = c.kind == "accel"
        return clean_window(
            w.samples,
            w.fs,
            full_scale=self.full_scale.get(c.name),
            spike_threshold=self.spike_threshold,
            dc_limit=self.dc_limit_g if vibration else None,
            drift_limit=self.drift_limit_g if vibration else None,
            detrend="linear" if vibration else "none",
            check_flatline=c.kind != "temperature",
        )

    def _accel(
        self, c: ChannelConfig, x: FloatArray, spec: Spectrum, shaft_hz: float
    ) -> tuple[dict[str, float], tuple[float, float] | None]:
        fs = spec.fs
        nyq = fs / 2
        td = _summarise(x)
        vb = (self.velocity_band[0], min(self.velocity_band[1], nyq))
        velocity = float(_velocity_rms_from_spectrum(spec, vb))
        zone = iso_10816_zone(
            velocity,
            machine_group=self.asset.severity.machine_group,
            foundation=self.asset.severity.foundation,
        )
        out = {
            "rms": td.rms,
            "peak": td.peak,
            "crest_factor": td.crest_factor,
            "kurtosis": td.kurtosis,
            "skewness": td.skewness,
            "velocity_rms": velocity,
            "iso_zone": float(ZONE_NUMBER[zone]),
        }
        # Spectral quantities outside the layout are not computed.
        if self._needs_orders:
            orders = np.array([1.0, 2.0, 3.0, float(self.asset.vane_count)]) * shaft_hz
            ov = _order_velocity_from_spectrum(spec, np.where(orders < nyq, orders, np.nan))
            out["order_1x"] = float(ov[0])
            out["order_2x"] = float(ov[1])
            out["order_3x"] = float(ov[2])
            out["vane_pass"] = float(ov[3])
        if self._needs_high_band:
            hb = (self.high_band[0], min(self.high_band[1], 0.95 * nyq))
            out["high_band_rms"] = (
                float(_high_band_from_spectrum(spec, hb, False)) if hb[0] < hb[1] else math.nan
            )
        if self._needs_centroid:
            out["spectral_centroid"] = float(_centroid_from_spectrum(spec, None))
        if self._needs_peak:
            peaks = _dominant_peaks_from_spectrum(spec, 1, vb)
            out["peak_frequency"] = (
                float(peaks.frequencies_hz[0]) if peaks.frequencies_hz.size else math.nan
            )
        band = None
        if self._needs_envelope and c.bearing is not None:
            env, band = self._envelope(spec, x, fs, shaft_hz, self._multiples[c.bearing])
            out.update(env)
        return out, band

    def _envelope(
        self,
        spec: Spectrum,
        x: FloatArray,
        fs: float,
        shaft_hz: float,
        multiples: FloatArray,
    ) -> tuple[dict[str, float], tuple[float, float] | None]:
        nan = math.nan
        missing = dict.fromkeys(_ENV_NAMES, nan)
        nyq = fs / 2
        if self.envelope_min_hz >= nyq or 4 * self.sk_nperseg > x.size:
            return missing, None
        # Lines: ftf, bsf, 2 bsf, bpfo, bpfi at the current speed.
        lines = multiples * shaft_hz
        n_floor = 20
        fmax = float(lines.max()) * (1 + self.slip_tolerance) + (n_floor + 4) * spec.df
        if fmax >= nyq:
            return missing, None
        sel = _select_band_core(
            x,
            fs,
            self.sk_nperseg,
            min(self.envelope_min_bandwidth_hz, nyq - self.envelope_min_hz),
            (self.envelope_min_hz, nyq),
        )
        band = (sel.low_hz, sel.high_hz)
        ses = _ses_from_spectrum(spec, band, fmax)
        levels = _line_levels(ses, lines, self.slip_tolerance, n_floor)
        bsf = np.nanmax(levels[1:3]) if np.isfinite(levels[1:3]).any() else nan
        return {
            "env_ftf": float(levels[0]),
            "env_bsf": float(bsf),
            "env_bpfo": float(levels[3]),
            "env_bpfi": float(levels[4]),
        }, band

    def _pressure(self, x: FloatArray, fs: float, shaft_hz: float) -> dict[str, float]:
        mean = float(x.mean())
        ac = x - mean
        vp = self.asset.vane_count * shaft_hz
        pulsation = math.nan
        if vp < fs / 2 and x.size >= 16:
            pulsation = float(_tone_rms_from_spectrum(_spectrum(ac, fs), np.array([vp]))[0])
        return {"mean": mean, "ripple": float(np.sqrt(np.mean(ac * ac))), "vane_pass": pulsation}

    # ------------------------------------------------------------------ operating condition
    def _drive_hz(self, window_set: WindowSet) -> float | None:
        p = window_set.process
        rpm = p.get("drive_speed_rpm")
        if rpm is not None and math.isfinite(rpm) and rpm > 0:
            return float(rpm) / 60.0
        hz = p.get("shaft_speed_hz")
        if hz is not None and math.isfinite(hz) and hz > 0:
            return float(hz)
        return None

    def _shaft_speed(
        self,
        window_set: WindowSet,
        spectra: Mapping[str, Spectrum],
    ) -> _Speed:
        for c in self.asset.channels:
            w = window_set.channels.get(c.name)
            if c.kind != "tacho" or w is None or w.samples.size < 4:
                continue
            samples = np.asarray(w.samples, dtype=float)
            if np.isfinite(samples).all():
                hz = speed_from_tacho(samples, w.fs)
                if hz is not None and 0 < hz <= 1000:
                    return _Speed(hz, ShaftSpeedSource.TACHO)
        drive = self._drive_hz(window_set)
        if drive is not None:
            search = (drive * (1 - _DRIVE_MARGIN), drive * (1 + _DRIVE_MARGIN))
        else:
            lo, hi = self.asset.speed_range_rpm
            search = (lo / 60 * (1 - _SPEED_MARGIN), hi / 60 * (1 + _SPEED_MARGIN))
        for c in self.asset.channels:
            spec = spectra.get(c.name)
            if spec is None or search[1] >= spec.fs / 2:
                continue
            hz = _speed_from_spectrum(spec, search, 3, 4.0)
            if hz is not None:
                return _Speed(hz, ShaftSpeedSource.SPECTRUM)
            break  # one accelerometer decides; the others see the same shaft
        if drive is not None:
            return _Speed(drive, ShaftSpeedSource.DRIVE)
        return _Speed(self.asset.nominal_speed_rpm / 60.0, ShaftSpeedSource.NOMINAL)

    def _operating(
        self,
        window_set: WindowSet,
        speed: _Speed,
        current_rms: float | None,
        suction_kpa: float | None,
    ) -> OperatingCondition:
        p = window_set.process
        load = None
        if current_rms is not None and self.asset.rated_current_a:
            load = current_rms / self.asset.rated_current_a
        if suction_kpa is None:
            suction_kpa = p.get("suction_pressure_kpa")
        fields: dict[str, float | None] = {
            "load_fraction": load,
            "flow_m3_per_h": p.get("flow_m3_per_h"),
            "suction_pressure_kpa": suction_kpa,
            "fluid_temperature_c": p.get("fluid_temperature_c"),
        }
        bounds = {
            "load_fraction": (0.0, 10.0),
            "flow_m3_per_h": (0.0, 1e6),
            "suction_pressure_kpa": (-200.0, 1e5),
            "fluid_temperature_c": (-100.0, 1000.0),
        }
        # Values outside the contract's plausible range are dropped rather than sent.
        clean = {
            k: float(v)
            for k, v in fields.items()
            if v is not None and math.isfinite(v) and bounds[k][0] <= v <= bounds[k][1]
        }
        hz = speed.hz if 0 <= speed.hz <= 1000 else None
        return OperatingCondition(
            shaft_speed_hz=hz,
            shaft_speed_source=speed.source if hz is not None else None,
            **clean,
        )


def _defect_multiples(g: BearingGeometry) -> FloatArray:
    f = g.defect_frequencies(1.0)
    return np.array([f.ftf, f.bsf, 2 * f.bsf, f.bpfo, f.bpfi])
