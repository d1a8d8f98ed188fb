"""Pure, vectorised signal and hydraulic models behind the pump simulator.

Nothing here does I/O or keeps state; random draws come from the ``rng`` the caller passes in.
Accelerations are in g, velocities in mm/s RMS, pressures in kPa gauge unless stated.

Vibration model
---------------
* Shaft-order lines (1x imbalance, 2x misalignment, vane pass, ...) are sums of sinusoids at
  exact multiples of the shaft rate, specified by their velocity RMS and phase.
* A rolling-element bearing defect is a train of impulses at the defect frequency, each
  exciting a lightly damped structural resonance of the bearing housing (a few kHz). Impulse
  spacing jitters randomly by ``slip`` (1-2 % is typical of rolling elements slipping in and
  out of the load zone), and impulse strength follows the Stribeck load distribution as an
  inner-race defect turns with the shaft or a rolling element turns with the cage. This is
  the point-defect model of McFadden & Smith (1984) with the random slip of Randall &
  Antoni (2011).
* Cavitation is bursts of broadband high-frequency noise whose rate and strength grow as the
  NPSH margin shrinks.

Hydraulic model
---------------
A quadratic pump curve ``H = H0 (N/N0)^2 - a Q^2`` (affinity-consistent: ``Q ∝ N``,
``H ∝ N^2``, ``P ∝ N^3``, common practice) against a system curve ``H = Hs + c Q^2``; required
NPSH scales the same way. Water properties come from standard correlations (from memory).

References
----------
.. [1] P. D. McFadden, J. D. Smith, "Model for the vibration produced by a single point defect
   in a rolling element bearing", J. Sound Vib. 96(1) (1984) 69-82 (abstract read; details
   from memory).
.. [2] R. B. Randall, J. Antoni, "Rolling element bearing diagnostics - a tutorial", Mech.
   Syst. Signal Process. 25 (2011) 485-520 (from memory).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import numpy.typing as npt
from scipy import signal

from edge_agent.assets import BearingGeometry

__all__ = [
    "STANDARD_GRAVITY",
    "DefectFrequencies",
    "InductionMotor",
    "PumpCurve",
    "PumpHydraulics",
    "SystemCurve",
    "bearing_defect_frequencies",
    "cavitation_intensity",
    "cavitation_noise",
    "impulse_train",
    "load_zone_factor",
    "resonance_coefficients",
    "ring_resonance",
    "shaft_order_vibration",
    "velocity_to_accel_peak_g",
    "water_density_kg_m3",
    "water_vapour_pressure_kpa",
    "water_viscosity_pa_s",
]

FloatArray = npt.NDArray[np.float64]

STANDARD_GRAVITY = 9.80665
"""Standard gravity, m/s^2 (ISO 80000-3, from memory)."""


class DefectFrequencies(NamedTuple):
    """Bearing defect frequencies, Hz."""

    ftf_hz: float
    bsf_hz: float
    bpfo_hz: float
    bpfi_hz: float


def bearing_defect_frequencies(geometry: BearingGeometry, shaft_hz: float) -> DefectFrequencies:
    """Kinematic defect frequencies of a rolling-element bearing with a stationary outer race.

    Parameters
    ----------
    geometry : BearingGeometry
        Number of elements ``n``, element diameter ``d``, pitch diameter ``D``, contact angle.
    shaft_hz : float
        Shaft rotation frequency ``fr``, Hz.

    Returns
    -------
    DefectFrequencies
        With ``r = (d/D) cos(phi)``: FTF ``= fr/2 (1 - r)``, BSF ``= D/(2d) fr (1 - r^2)``,
        BPFO ``= n/2 fr (1 - r)``, BPFI ``= n/2 fr (1 + r)``.

    References
    ----------
    .. [1] Randall & Antoni (2011), eqs. 1-4 (from memory; the formulas are standard).

    Examples
    --------
    >>> g = BearingGeometry(n_elements=9, element_diameter_mm=7.94, pitch_diameter_mm=39.04)
    >>> round(bearing_defect_frequencies(g, 1.0).bpfo_hz, 3)
    3.585
    """
    f = geometry.defect_frequencies(shaft_hz)
    return DefectFrequencies(ftf_hz=f.ftf, bsf_hz=f.bsf, bpfo_hz=f.bpfo, bpfi_hz=f.bpfi)


def velocity_to_accel_peak_g(
    velocity_rms_mm_s: npt.ArrayLike, freq_hz: npt.ArrayLike
) -> FloatArray:
    """Peak acceleration (g) of a sinusoid with the given velocity RMS (mm/s) and frequency (Hz).

    ``a_peak = sqrt(2) v_rms 2 pi f / g0`` (common practice).

    Examples
    --------
    >>> round(float(velocity_to_accel_peak_g(11.04, 100.0)), 3)
    1.0
    """
    v = np.asarray(velocity_rms_mm_s, dtype=float) * 1e-3
    return np.sqrt(2.0) * v * 2.0 * np.pi * np.asarray(freq_hz, dtype=float) / STANDARD_GRAVITY


def shaft_order_vibration(
    n: int,
    fs: float,
    *,
    shaft_hz: float,
    orders: npt.ArrayLike,
    velocity_rms_mm_s: npt.ArrayLike,
    phase_rad: npt.ArrayLike,
    start_phase_rad: float = 0.0,
) -> FloatArray:
    """Acceleration (g) of a sum of shaft-order lines.

    Parameters
    ----------
    n : int
        Number of samples.
    fs : float
        Sample rate, Hz.
    shaft_hz : float
        Shaft rate, Hz.
    orders : array_like, shape (k,)
        Multiples of the shaft rate (need not be integers).
    velocity_rms_mm_s : array_like, shape (k,) or (c, k)
        Velocity RMS of each line, mm/s; a leading axis gives ``c`` channels at once.
    phase_rad : array_like, same shape as ``velocity_rms_mm_s``
        Phase of each line relative to the shaft's angle, rad.
    start_phase_rad : float
        Shaft angle at the first sample, rad.

    Returns
    -------
    ndarray, shape (n,) or (c, n)
        Acceleration, g. Lines at or above ``fs/2`` are left out.

    Examples
    --------
    >>> a = shaft_order_vibration(25600, 25600.0, shaft_hz=100.0, orders=[1.0],
    ...                           velocity_rms_mm_s=[11.04], phase_rad=[0.0])
    >>> round(float(a.max()), 2)
    1.0
    """
    orders_arr = np.atleast_1d(np.asarray(orders, dtype=float))
    vel = np.asarray(velocity_rms_mm_s, dtype=float)
    phase = np.asarray(phase_rad, dtype=float)
    if vel.shape[-1] != orders_arr.size or phase.shape != vel.shape:
        raise ValueError(
            "velocity_rms_mm_s and phase_rad must have shape (..., len(orders)) = "
            f"(..., {orders_arr.size}), got {vel.shape} and {phase.shape}"
        )
    lead = vel.shape[:-1]
    out = np.zeros((*lead, n))
    if n == 0:
        return out
    angle = (2.0 * np.pi * shaft_hz / fs) * np.arange(n) + start_phase_rad
    freqs = orders_arr * shaft_hz
    amp = velocity_to_accel_peak_g(vel, freqs)
    for k, order in enumerate(orders_arr):
        if freqs[k] >= fs / 2 or not np.any(amp[..., k]):
            continue
        out += amp[..., k, None] * np.sin(order * angle + phase[..., k, None])
    return out


def load_zone_factor(
    angle_rad: npt.ArrayLike, *, load_distribution: float = 0.5, exponent: float = 1.5
) -> FloatArray:
    """Stribeck load distribution around a radially loaded bearing, normalised to 1 at its peak.

    ``q(psi) = (1 - (1 - cos psi) / (2 eps))^e`` inside the load zone and 0 outside, with
    ``psi`` measured from the load direction; ``eps = 0.5`` gives a load zone of +-90 deg, and
    ``e = 1.5`` for ball bearings (10/9 for roller bearings).

    References
    ----------
    .. [1] McFadden & Smith (1984), after Stribeck and Harris (from memory).

    Examples
    --------
    >>> load_zone_factor([0.0, np.pi / 2, np.pi]).round(6).tolist()
    [1.0, 0.0, 0.0]
    """
    if not 0.0 < load_distribution <= 1.0:
        raise ValueError(f"load_distribution must be in (0, 1], got {load_distribution!r}")
    psi = np.asarray(angle_rad, dtype=float)
    base = 1.0 - (1.0 - np.cos(psi)) / (2.0 * load_distribution)
    return np.power(np.clip(base, 0.0, None), exponent)


def impulse_train(
    n: int,
    fs: float,
    *,
    rate_hz: float,
    amplitude: float,
    rng: np.random.Generator,
    slip: float = 0.015,
    modulation_hz: float = 0.0,
    modulation_phase_rad: float = 0.0,
    modulation_floor: float = 0.0,
    amplitude_scatter: float = 0.1,
) -> FloatArray:
    """A sparse train of impulses at ``rate_hz`` with random slip and load-zone modulation.

    Parameters
    ----------
    n, fs
        Number of samples and sample rate, Hz.
    rate_hz : float
        Mean impulse rate (the defect frequency), Hz.
    amplitude : float
        Impulse strength at the centre of the load zone.
    rng : numpy.random.Generator
        Source of the slip, scatter and starting phase.
    slip : float
        Relative standard deviation of each impulse spacing (0.01-0.02 is typical).
    modulation_hz : float
        Rate at which the defect passes through the load zone (shaft rate for an inner-race
        defect, cage rate for a rolling-element defect); 0 for a stationary defect.
    modulation_phase_rad : float
        Angle of the defect from the load direction at the first sample, rad.
    modulation_floor : float
        Fraction of ``amplitude`` left outside the load zone.
    amplitude_scatter : float
        Relative standard deviation of impulse strength from impact to impact.

    Returns
    -------
    ndarray, shape (n,)
        Zero except at the impulse samples.

    References
    ----------
    .. [1] McFadden & Smith (1984); Randall & Antoni (2011) for the random slip (from memory).

    Examples
    --------
    >>> x = impulse_train(25600, 25600.0, rate_hz=100.0, amplitude=1.0,
    ...                   rng=np.random.default_rng(0), slip=0.0, amplitude_scatter=0.0)
    >>> int(np.count_nonzero(x))
    100
    """
    out = np.zeros(n)
    if n == 0 or rate_hz <= 0 or amplitude == 0:
        return out
    period = 1.0 / rate_hz
    duration = n / fs
    count = math.ceil(duration * rate_hz * (1.0 + 5.0 * slip)) + 2
    spacing = period * (1.0 + slip * rng.standard_normal(count))
    times = rng.uniform(0.0, period) + np.concatenate(([0.0], np.cumsum(spacing[:-1])))
    strength = amplitude * (1.0 + amplitude_scatter * rng.standard_normal(count))
    if modulation_hz > 0:
        psi = 2.0 * np.pi * modulation_hz * times + modulation_phase_rad
        zone = load_zone_factor(psi)
        strength *= modulation_floor + (1.0 - modulation_floor) * zone
    index = np.rint(times * fs).astype(np.int64)
    keep = index < n
    return np.bincount(index[keep], weights=strength[keep], minlength=n)[:n].astype(float)


def resonance_coefficients(
    resonance_hz: float, damping_ratio: float, fs: float
) -> tuple[FloatArray, FloatArray]:
    """IIR coefficients ``(b, a)`` of a damped resonance whose impulse response peaks near 1.

    Impulse-invariant discretisation of ``h(t) = exp(-zeta w_n t) sin(w_d t)``.

    Examples
    --------
    >>> b, a = resonance_coefficients(3000.0, 0.05, 25600.0)
    >>> a.round(4).tolist()
    [1.0, -1.4295, 0.929]
    """
    if not 0 < resonance_hz < fs / 2:
        raise ValueError(
            f"resonance_hz must lie in (0, fs/2 = {fs / 2:g}) Hz, got {resonance_hz!r}"
        )
    if not 0 < damping_ratio < 1:
        raise ValueError(f"damping_ratio must be in (0, 1), got {damping_ratio!r}")
    wn = 2.0 * np.pi * resonance_hz
    wd = wn * math.sqrt(1.0 - damping_ratio**2)
    radius = math.exp(-damping_ratio * wn / fs)
    b = np.array([0.0, radius * math.sin(wd / fs)])
    a = np.array([1.0, -2.0 * radius * math.cos(wd / fs), radius * radius])
    return b, a


def ring_resonance(
    x: npt.ArrayLike, fs: float, *, resonance_hz: float, damping_ratio: float, axis: int = -1
) -> FloatArray:
    """Pass an excitation through a damped structural resonance (see `resonance_coefficients`).

    Examples
    --------
    >>> x = np.zeros(256); x[0] = 1.0
    >>> y = ring_resonance(x, 25600.0, resonance_hz=3000.0, damping_ratio=0.05)
    >>> 0.8 < float(y.max()) <= 1.0
    True
    """
    x = np.asarray(x, dtype=float)
    b, a = resonance_coefficients(resonance_hz, damping_ratio, fs)
    return np.asarray(signal.lfilter(b, a, x, axis=axis), dtype=float)


def cavitation_intensity(
    npsh_available_m: npt.ArrayLike,
    npsh_required_m: npt.ArrayLike,
    *,
    incipient_margin: float = 3.0,
) -> FloatArray:
    """Cavitation intensity in [0, 1] from the NPSH margin ratio ``NPSHa / NPSHr``.

    Noise starts at incipient cavitation, well above the 3 % head-drop point NPSHr; the
    intensity rises linearly from 0 at ``incipient_margin`` to 1 at a ratio of 1 (common
    practice, no source: incipient-cavitation NPSH is often 2-5 times NPSH3).

    Examples
    --------
    >>> cavitation_intensity([14.0, 8.0, 4.0, 3.0], 4.0).tolist()
    [0.0, 0.5, 1.0, 1.0]
    """
    if not incipient_margin > 1.0:
        raise ValueError(f"incipient_margin must be > 1, got {incipient_margin!r}")
    ratio = np.asarray(npsh_available_m, dtype=float) / np.asarray(npsh_required_m, dtype=float)
    return np.clip((incipient_margin - ratio) / (incipient_margin - 1.0), 0.0, 1.0)


def cavitation_noise(
    n: int,
    fs: float,
    *,
    intensity: float,
    rng: np.random.Generator,
    peak_g: float = 1.5,
    burst_rate_hz: float = 150.0,
    burst_decay_s: float = 0.002,
    highpass_hz: float = 4000.0,
) -> FloatArray:
    """Bursts of high-frequency broadband noise from collapsing vapour bubbles, g.

    Bursts arrive as a Poisson process at ``burst_rate_hz * intensity``, each decaying
    exponentially over ``burst_decay_s``, on top of a steady floor of 15 % of a burst's
    strength; the carrier is white noise high-passed at ``highpass_hz`` (second-order
    Butterworth). Strength scales with ``intensity`` (0 = none).

    Examples
    --------
    >>> x = cavitation_noise(25600, 25600.0, intensity=0.0, rng=np.random.default_rng(0))
    >>> float(np.abs(x).max())
    0.0
    """
    out = np.zeros(n)
    if n == 0 or intensity <= 0:
        return out
    if not 0 < highpass_hz < fs / 2:
        raise ValueError(f"highpass_hz must lie in (0, fs/2 = {fs / 2:g}) Hz, got {highpass_hz!r}")
    intensity = min(float(intensity), 1.0)
    arrivals = rng.poisson(burst_rate_hz * intensity * n / fs)
    starts = rng.integers(0, n, size=arrivals)
    kicks = np.bincount(starts, weights=rng.uniform(0.3, 1.0, size=arrivals), minlength=n)
    decay = math.exp(-1.0 / (burst_decay_s * fs))
    envelope = signal.lfilter([1.0], [1.0, -decay], kicks)
    sos = _highpass_sos(highpass_hz, fs)
    carrier = signal.sosfilt(sos, rng.standard_normal(n))
    return np.asarray(peak_g * intensity * (0.15 + envelope) * carrier, dtype=float)


def _highpass_sos(cutoff_hz: float, fs: float) -> FloatArray:
    return np.array(_highpass_design(cutoff_hz, fs))  # a fresh array: sosfilt wants it writable


@functools.lru_cache(maxsize=32)
def _highpass_design(cutoff_hz: float, fs: float) -> tuple[tuple[float, ...], ...]:
    sos = signal.butter(2, cutoff_hz, btype="highpass", fs=fs, output="sos")
    return tuple(tuple(float(v) for v in row) for row in sos)


def water_vapour_pressure_kpa(temperature_c: npt.ArrayLike) -> FloatArray:
    """Vapour pressure of water, kPa, by the Antoine equation (1-100 degC).

    ``log10(p / mmHg) = 8.07131 - 1730.63 / (233.426 + T)`` (constants from memory).

    Examples
    --------
    >>> round(float(water_vapour_pressure_kpa(100.0)), 1)
    101.3
    """
    t = np.asarray(temperature_c, dtype=float)
    return 0.133322 * np.power(10.0, 8.07131 - 1730.63 / (233.426 + t))


def water_density_kg_m3(temperature_c: npt.ArrayLike) -> FloatArray:
    """Density of water, kg/m^3 (Thiesen-type correlation, 0-100 degC, from memory).

    Examples
    --------
    >>> round(float(water_density_kg_m3(20.0)), 1)
    998.2
    """
    t = np.asarray(temperature_c, dtype=float)
    return 1000.0 * (1.0 - (t + 288.9414) / (508929.2 * (t + 68.12963)) * (t - 3.9863) ** 2)


def water_viscosity_pa_s(temperature_c: npt.ArrayLike) -> FloatArray:
    """Dynamic viscosity of water, Pa s: ``2.414e-5 * 10^(247.8 / (T_K - 140))`` (from memory).

    Examples
    --------
    >>> round(float(water_viscosity_pa_s(20.0)) * 1e3, 2)
    1.0
    """
    t = np.asarray(temperature_c, dtype=float)
    return 2.414e-5 * np.power(10.0, 247.8 / (t + 273.15 - 140.0))


@dataclass(frozen=True, slots=True, kw_only=True)
class PumpCurve:
    """Head, efficiency and required NPSH of a centrifugal pump, scaled by the affinity laws.

    At speed ``N`` and flow ``Q``: ``H = H0 s^2 - a Q^2`` with ``s = N / N0``;
    efficiency is a parabola peaking at ``bep_efficiency`` at ``Q = bep_flow * s``;
    ``NPSHr = npsh0 s^2 + npsh2 Q^2``. Every term is affinity-consistent (``Q ∝ N``,
    ``H ∝ N^2``; common practice). ``head_loss`` (0..1) scales the head of a worn impeller.

    Examples
    --------
    >>> c = PumpCurve()
    >>> round(c.head_m(120.0, 1780.0), 1), round(c.head_m(60.0, 890.0), 1)
    (60.0, 15.0)
    """

    nominal_speed_rpm: float = 1780.0
    shutoff_head_m: float = 72.0
    bep_flow_m3_per_h: float = 120.0
    bep_head_m: float = 60.0
    bep_efficiency: float = 0.74
    npsh_required_bep_m: float = 4.0

    @property
    def head_coefficient(self) -> float:
        """``a`` in ``H = H0 s^2 - a Q^2``, m/(m^3/h)^2."""
        return (self.shutoff_head_m - self.bep_head_m) / self.bep_flow_m3_per_h**2

    def head_m(self, flow_m3_per_h: float, speed_rpm: float, *, head_loss: float = 0.0) -> float:
        s = speed_rpm / self.nominal_speed_rpm
        head = self.shutoff_head_m * s * s - self.head_coefficient * flow_m3_per_h**2
        return (1.0 - head_loss) * head

    def efficiency(self, flow_m3_per_h: float, speed_rpm: float) -> float:
        s = speed_rpm / self.nominal_speed_rpm
        x = flow_m3_per_h / (self.bep_flow_m3_per_h * s) - 1.0
        return max(self.bep_efficiency * (1.0 - 0.8 * x * x), 0.2)

    def npsh_required_m(self, flow_m3_per_h: float, speed_rpm: float) -> float:
        s = speed_rpm / self.nominal_speed_rpm
        half = 0.5 * self.npsh_required_bep_m
        return half * s * s + half * (flow_m3_per_h / self.bep_flow_m3_per_h) ** 2


@dataclass(frozen=True, slots=True, kw_only=True)
class SystemCurve:
    """The pipeline the pump works against: ``H = static_head_m + c Q^2``.

    ``friction_head_at_bep_m`` is the friction head at the pump's best-efficiency flow
    ``bep_flow_m3_per_h``.

    Examples
    --------
    >>> SystemCurve(static_head_m=25.0, friction_head_at_bep_m=35.0).head_m(120.0)
    60.0
    """

    static_head_m: float = 25.0
    friction_head_at_bep_m: float = 35.0
    bep_flow_m3_per_h: float = 120.0

    @property
    def friction_coefficient(self) -> float:
        return self.friction_head_at_bep_m / self.bep_flow_m3_per_h**2

    def head_m(self, flow_m3_per_h: float) -> float:
        return self.static_head_m + self.friction_coefficient * flow_m3_per_h**2


@dataclass(frozen=True, slots=True, kw_only=True)
class InductionMotor:
    """A four-pole induction motor on a V/f drive, for slip and line current.

    The drive's output frequency is ``f = 2 * reference_rpm / 60`` (four poles); the shaft runs
    slower by the slip, which grows in proportion to torque (``rated_slip`` at rated torque).
    Line current is the vector sum of a magnetising part (``magnetising_fraction`` of rated
    current) and a torque-producing part ``P_in / (sqrt(3) V)``, with the voltage in
    proportion to frequency up to ``rated_voltage_v`` at ``supply_hz`` (common practice).

    Examples
    --------
    >>> m = InductionMotor(rated_power_kw=37.0, rated_current_a=58.0)
    >>> round(m.slip(37.0, 1780.0), 4)
    0.012
    """

    rated_power_kw: float
    rated_current_a: float
    rated_voltage_v: float = 460.0
    supply_hz: float = 60.0
    rated_speed_rpm: float = 1780.0
    rated_slip: float = 0.012
    efficiency: float = 0.93
    magnetising_fraction: float = 0.35

    def slip(self, shaft_power_kw: float, shaft_rpm: float) -> float:
        torque_ratio = (shaft_power_kw / self.rated_power_kw) * (self.rated_speed_rpm / shaft_rpm)
        return self.rated_slip * max(torque_ratio, 0.0)

    def current_rms_a(self, shaft_power_kw: float, electrical_hz: float) -> float:
        volts = self.rated_voltage_v * min(electrical_hz / self.supply_hz, 1.0)
        active = 1e3 * shaft_power_kw / self.efficiency / (math.sqrt(3.0) * volts)
        magnetising = self.magnetising_fraction * self.rated_current_a
        return math.hypot(active, magnetising)


@dataclass(frozen=True, slots=True, kw_only=True)
class PumpHydraulics:
    """One installation: the pump, the pipeline it feeds, its suction line and its motor.

    ``suction_loss_at_bep_kpa`` is the suction-line friction loss at the best-efficiency flow;
    it grows with ``Q^2``.
    """

    pump: PumpCurve
    system: SystemCurve
    motor: InductionMotor
    suction_loss_at_bep_kpa: float = 12.0
