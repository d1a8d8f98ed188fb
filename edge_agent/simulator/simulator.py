"""The pump simulator: raw multi-channel windows from a physics-based model of one pump.

`PumpSimulator.window(t)` is a pure function of the seed, the asset, the scenario and ``t``:
windows can be generated in any order, in parallel, or again later, and come out identical.
Each window draws its randomness from its own seed sequence ``(seed, asset, t)``, with one
independent stream per channel, so a sensor fault on one channel leaves the others untouched.

Per window the simulator
1. reads the duty (flow demand or speed reference, temperatures, tank pressure),
2. solves the hydraulics: the speed that meets the demand on the (possibly worn) pump curve
   against the system curve, suction pressure after the suction line and strainer, NPSH
   margin, discharge pressure, shaft power, slip and line current,
3. synthesises every configured channel at its own rate, and
4. applies any active sensor fault.
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta

import numpy as np
import numpy.typing as npt
from scipy import signal

from edge_agent.assets import AssetConfig, ChannelConfig
from edge_agent.simulator import physics
from edge_agent.simulator.duty import DutyPoint, DutyProfile, SaltbushDuty
from edge_agent.simulator.fleet import SALTBUSH_ASSET_IDS, saltbush_asset, saltbush_hydraulics
from edge_agent.simulator.physics import (
    STANDARD_GRAVITY,
    InductionMotor,
    PumpCurve,
    PumpHydraulics,
    SystemCurve,
)
from edge_agent.simulator.scenario import (
    BEARING_FAULTS,
    DEMO_START,
    FaultScenario,
    require_utc,
    saltbush_scenarios,
)
from edge_agent.simulator.sensor_faults import DEFAULT_DRIFT_PER_DAY, apply_sensor_fault
from edge_agent.windows import ChannelWindow, WindowSet

__all__ = ["OperatingState", "PumpSimulator", "saltbush_simulators"]

FloatArray = npt.NDArray[np.float64]

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_BAROMETRIC_KPA = 97.0  # site about 300 m above sea level (illustrative)
_N_LINES = 5  # shaft-order lines on the accelerometers: 1x, 2x, 3x, vane pass, 2x vane pass
_PREROLL = 256  # samples run through the resonance before the window so it starts rung-in
_HEAD_LOSS_AT_FAILURE = 0.12  # impeller wear: head lost at severity 1 (illustrative)
_NOMINAL_SUPPLY_KPA = 85.0
_NOMINAL_FLUID_C = 33.0


@dataclass(frozen=True, slots=True, kw_only=True)
class OperatingState:
    """The solved operating point of one window (truth, before any sensor error)."""

    drive_speed_rpm: float
    shaft_hz: float
    electrical_hz: float
    flow_m3_per_h: float
    head_m: float
    suction_kpa: float
    discharge_kpa: float
    npsh_available_m: float
    npsh_required_m: float
    cavitation_intensity: float
    shaft_power_kw: float
    current_rms_a: float
    fluid_temperature_c: float
    ambient_temperature_c: float
    density_kg_m3: float
    viscosity_pa_s: float
    bearing_temp_c: float


@dataclass(frozen=True, slots=True)
class _AccelTraits:
    line_velocity: FloatArray  # mm/s RMS at nominal speed, per line (1x, 2x, 3x, VP, 2VP)
    line_phase: FloatArray
    fault_phase: FloatArray
    resonance_hz: float
    damping_ratio: float
    background_g: float
    floor_g: float
    b: FloatArray
    a: FloatArray
    excitation_scale: float


def _as_micros(t: datetime) -> int:
    micros = (t - _EPOCH) // timedelta(microseconds=1)
    if micros < 0:
        raise ValueError(f"t must not be before 1970-01-01T00:00:00Z, got {t.isoformat()}")
    return int(micros)


def _default_hydraulics(asset: AssetConfig) -> PumpHydraulics:
    if asset.asset_id in SALTBUSH_ASSET_IDS:
        return saltbush_hydraulics(asset.asset_id)
    power = asset.power_kw or 37.0
    current = asset.rated_current_a or power * 1.57
    return PumpHydraulics(
        pump=PumpCurve(nominal_speed_rpm=asset.nominal_speed_rpm),
        system=SystemCurve(),
        motor=InductionMotor(
            rated_power_kw=power, rated_current_a=current, rated_speed_rpm=asset.nominal_speed_rpm
        ),
    )


class PumpSimulator:
    """Simulated raw windows of one centrifugal pump under a fault scenario.

    Parameters
    ----------
    asset : AssetConfig
        The pump and its channels; each channel is synthesised at its own ``fs_hz`` over its
        ``window_s``. Pressure channels are recognised by name (``discharge...``/``suction...``).
    scenario : FaultScenario
        The pump's fault history.
    seed : int
        Seed of every random draw; together with ``t`` it fixes a window exactly.
    duty : DutyProfile, optional
        Process conditions over time; default `SaltbushDuty` for this asset and seed.
    hydraulics : PumpHydraulics, optional
        Pump curve, system curve, suction line and motor; default from the Saltbush Flats table
        for a fleet pump, generic otherwise.

    Examples
    --------
    >>> from edge_agent.simulator.fleet import saltbush_asset
    >>> sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=0)
    >>> ws = sim.window(datetime(2026, 3, 1, tzinfo=UTC))
    >>> ws.channels["de_accel"].samples.shape, ws.labels["fault"]
    ((25600,), 'healthy')
    """

    def __init__(
        self,
        asset: AssetConfig,
        scenario: FaultScenario,
        *,
        seed: int,
        duty: DutyProfile | None = None,
        hydraulics: PumpHydraulics | None = None,
    ) -> None:
        if not isinstance(seed, int | np.integer) or seed < 0:
            raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
        self.asset = asset
        self.scenario = scenario
        self.seed = int(seed)
        self.hydraulics = hydraulics if hydraulics is not None else _default_hydraulics(asset)
        self.duty: DutyProfile = (
            duty
            if duty is not None
            else SaltbushDuty(
                asset_id=asset.asset_id,
                seed=self.seed,
                bep_flow_m3_per_h=self.hydraulics.pump.bep_flow_m3_per_h,
            )
        )
        self._validate()
        self._asset_key = zlib.crc32(asset.asset_id.encode())
        unit_rng = np.random.default_rng([self.seed, self._asset_key, 0x0417])
        self._accel = {
            c.name: self._draw_accel_traits(c, unit_rng)
            for c in asset.channels
            if c.kind == "accel"
        }
        self._slip = float(unit_rng.uniform(0.01, 0.02))
        self._defect_peak_g = float(unit_rng.uniform(3.0, 5.0))
        self._blockage = self._strainer_blockage_at_failure()
        vanes = asset.vane_count
        self._orders = np.array([1.0, 2.0, 3.0, vanes, 2.0 * vanes])
        self._generators = {
            "accel": self._accel_channel,
            "pressure": self._pressure_channel,
            "current": self._current_channel,
            "temperature": self._temperature_channel,
            "tacho": self._tacho_channel,
        }

    def __repr__(self) -> str:
        return (
            f"PumpSimulator(asset_id={self.asset.asset_id!r}, fault={self.scenario.fault!r}, "
            f"seed={self.seed})"
        )

    # ------------------------------------------------------------------ set-up
    def _validate(self) -> None:
        names = {c.name for c in self.asset.channels}
        for c in self.asset.channels:
            if c.kind == "pressure" and not ("discharge" in c.name or "suction" in c.name):
                raise ValueError(
                    f"pressure channel {c.name!r} must have 'discharge' or 'suction' in its name "
                    "so the simulator knows where it sits"
                )
            if c.kind == "accel" and c.fs_hz < 2_000.0:
                raise ValueError(
                    f"accelerometer channel {c.name!r} needs fs_hz >= 2000 Hz to carry the "
                    f"bearing resonance, got {c.fs_hz:g}"
                )
        for e in self.scenario.sensor_faults:
            if e.channel not in names:
                raise ValueError(
                    f"sensor fault on channel {e.channel!r}, which is not among the asset's "
                    f"channels {sorted(names)}"
                )
        if (
            self.scenario.fault in BEARING_FAULTS
            and self.scenario.bearing not in self.asset.bearings
        ):
            raise ValueError(
                f"scenario bearing {self.scenario.bearing!r} is not among the asset's bearings "
                f"{sorted(self.asset.bearings)}"
            )

    def _draw_accel_traits(self, channel: ChannelConfig, rng: np.random.Generator) -> _AccelTraits:
        # On an end-suction pump the non-drive-end (inboard) bearing sits next to the overhung
        # impeller and hears more of the vane pass; the drive end sits at the coupling.
        near_impeller = channel.bearing == "nde"
        lo = (
            np.array([0.45, 0.12, 0.04, 0.35, 0.06])
            if near_impeller
            else np.array([0.55, 0.15, 0.05, 0.30, 0.05])
        )
        line_velocity = lo * rng.uniform(1.0, 1.55, size=lo.size)
        line_phase = rng.uniform(0.0, 2.0 * np.pi, size=lo.size)
        fault_phase = rng.uniform(0.0, 2.0 * np.pi, size=lo.size)
        top = min(4200.0, 0.4 * channel.fs_hz)
        resonance = float(rng.uniform(0.65, 1.0) * top)
        damping = float(rng.uniform(0.03, 0.06))
        b, a = physics.resonance_coefficients(resonance, damping, channel.fs_hz)
        radius2 = float(a[2])
        # white excitation of std e gives ~ e / sqrt(2 (1 - r^2)) RMS at the resonator output
        excitation_scale = math.sqrt(2.0 * (1.0 - radius2))
        return _AccelTraits(
            line_velocity=line_velocity,
            line_phase=line_phase,
            fault_phase=fault_phase,
            resonance_hz=resonance,
            damping_ratio=damping,
            background_g=float(rng.uniform(0.012, 0.02)),
            floor_g=0.002,
            b=b,
            a=a,
            excitation_scale=excitation_scale,
        )

    def _strainer_blockage_at_failure(self) -> float:
        """Extra suction-loss factor of a fouled strainer at severity 1.

        Calibrated so that at a typical duty (75 % of BEP flow, the speed that delivers it,
        nominal tank pressure and fluid temperature) NPSHa falls to 0.95 NPSHr: past the 3 %
        head-drop point, the failure threshold. At higher flow the fouled strainer is worse.
        """
        h = self.hydraulics
        pump, system = h.pump, h.system
        flow = 0.75 * pump.bep_flow_m3_per_h
        s2 = (system.static_head_m + (system.friction_coefficient + pump.head_coefficient)
              * flow**2) / pump.shutoff_head_m  # fmt: skip
        shaft_rpm = pump.nominal_speed_rpm * math.sqrt(max(s2, 0.0))
        rho = float(physics.water_density_kg_m3(_NOMINAL_FLUID_C))
        pv = float(physics.water_vapour_pressure_kpa(_NOMINAL_FLUID_C))
        npshr = pump.npsh_required_m(flow, shaft_rpm)
        target_kpa = 0.95 * npshr * rho * STANDARD_GRAVITY / 1e3 + pv - _BAROMETRIC_KPA
        clean_loss = h.suction_loss_at_bep_kpa * (flow / pump.bep_flow_m3_per_h) ** 2
        return max((_NOMINAL_SUPPLY_KPA - target_kpa) / clean_loss - 1.0, 0.0)

    # ------------------------------------------------------------------ hydraulics
    def operating_state(self, t: datetime) -> OperatingState:
        """The solved operating point at ``t`` (no sensor noise)."""
        t = require_utc(t)
        fault = self.scenario.fault_at(t)
        return self._solve(self.duty.at(t), fault, self.scenario.severity(t))

    def _solve(self, duty: DutyPoint, fault: str, severity: float) -> OperatingState:
        h = self.hydraulics
        pump, system, motor = h.pump, h.system, h.motor
        lo_rpm, hi_rpm = self.asset.speed_range_rpm
        n0 = pump.nominal_speed_rpm
        temp = duty.fluid_temperature_c
        rho = float(physics.water_density_kg_m3(temp))
        mu = float(physics.water_viscosity_pa_s(temp))
        pv = float(physics.water_vapour_pressure_kpa(temp))
        keep = 1.0 - (_HEAD_LOSS_AT_FAILURE * severity if fault == "impeller_wear" else 0.0)
        a_p, c_s, h0, hs = (
            pump.head_coefficient,
            system.friction_coefficient,
            pump.shutoff_head_m,
            system.static_head_m,
        )

        def flow_at(shaft_rpm: float) -> float:
            s = shaft_rpm / n0
            return math.sqrt(max(keep * h0 * s * s - hs, 0.0) / (keep * a_p + c_s))

        slip = 0.6 * motor.rated_slip
        shaft_rpm = flow = power = 0.0
        for _ in range(3):  # slip depends on load, load on speed: a few passes converge
            if duty.speed_reference_rpm is not None:
                reference = min(max(duty.speed_reference_rpm, lo_rpm), hi_rpm)
            else:
                q = duty.flow_demand_m3_per_h or 0.0
                need = n0 * math.sqrt((hs + (c_s + keep * a_p) * q * q) / (keep * h0))
                reference = min(max(need / (1.0 - slip), lo_rpm), hi_rpm)
            shaft_rpm = reference * (1.0 - slip)
            flow = flow_at(shaft_rpm)
            head = pump.head_m(flow, shaft_rpm, head_loss=1.0 - keep)
            s = shaft_rpm / n0
            hydraulic_kw = rho * STANDARD_GRAVITY * flow / 3600.0 * head / 1e3
            disc_kw = 0.6 * (mu / 1.0e-3) ** 0.25 * s**3  # disc friction grows with viscosity
            extra_kw = 0.8 * severity * s if fault == "misalignment" else 0.0
            power = hydraulic_kw / pump.efficiency(flow, shaft_rpm) + disc_kw + extra_kw
            slip = motor.slip(power, shaft_rpm)
        electrical_hz = reference / 30.0
        head = pump.head_m(flow, shaft_rpm, head_loss=1.0 - keep)

        blockage = self._blockage * severity if fault == "cavitation" else 0.0
        suction_loss = h.suction_loss_at_bep_kpa * (flow / pump.bep_flow_m3_per_h) ** 2
        suction = duty.supply_pressure_kpa - suction_loss * (1.0 + blockage)
        # the suction cannot pull below the fluid's vapour pressure: the flow vaporises instead
        suction = max(suction, pv + 0.5 - _BAROMETRIC_KPA)
        npsha = (_BAROMETRIC_KPA + suction - pv) * 1e3 / (rho * STANDARD_GRAVITY)
        npshr = pump.npsh_required_m(flow, shaft_rpm)
        intensity = float(physics.cavitation_intensity(npsha, npshr))
        margin = npsha / npshr
        head_factor = 1.0 - 0.03 * min(max((1.2 - margin) / 0.2, 0.0), 3.0)
        discharge = suction + rho * STANDARD_GRAVITY * head * head_factor / 1e3

        s = shaft_rpm / n0
        heat = 0.0  # the temperature sensor sits on the drive-end (thrust) bearing housing
        if fault in BEARING_FAULTS:
            heat = (18.0 if self.scenario.bearing == "de" else 6.0) * severity**2
        elif fault == "misalignment":
            heat = 10.0 * severity
        elif fault == "imbalance":
            heat = 4.0 * severity
        bearing_temp = (
            0.45 * temp
            + 0.55 * duty.ambient_temperature_c
            + 16.0 * s**1.5 * (0.8 + 0.2 * power / motor.rated_power_kw)
            + heat
        )
        return OperatingState(
            drive_speed_rpm=reference,
            shaft_hz=shaft_rpm / 60.0,
            electrical_hz=electrical_hz,
            flow_m3_per_h=flow,
            head_m=head * head_factor,
            suction_kpa=suction,
            discharge_kpa=discharge,
            npsh_available_m=npsha,
            npsh_required_m=npshr,
            cavitation_intensity=intensity,
            shaft_power_kw=power,
            current_rms_a=motor.current_rms_a(power, electrical_hz),
            fluid_temperature_c=temp,
            ambient_temperature_c=duty.ambient_temperature_c,
            density_kg_m3=rho,
            viscosity_pa_s=mu,
            bearing_temp_c=bearing_temp,
        )

    # ------------------------------------------------------------------ windows
    def window(self, t: datetime) -> WindowSet:
        """The window set starting at ``t`` (timezone-aware; converted to UTC).

        ``process`` holds what a gateway reads from the process side: ``drive_speed_rpm`` (the
        drive's speed reference, the synchronous speed of its output frequency; the shaft runs
        slower by the slip), ``flow_m3_per_h`` and ``fluid_temperature_c``.

        ``labels`` holds the truth: ``fault`` (a `FaultMode`), ``severity`` (0..1, 1 = failure
        threshold), ``sensor_fault`` (None or the kind of the first active sensor fault) with
        its ``sensor_fault_channel``, ``sensor_faults`` (channel -> kind of every active one),
        ``shaft_speed_hz``, ``faulty_bearing`` (bearing key for a bearing fault, else None) and
        ``cavitation_intensity`` (0..1, from the NPSH margin, whatever the fault).
        """
        t = require_utc(t)
        micros = _as_micros(t)
        fault = self.scenario.fault_at(t)
        severity = self.scenario.severity(t)
        state = self._solve(self.duty.at(t), fault, severity)
        seq = np.random.SeedSequence([self.seed, self._asset_key, micros])
        channel_seqs = seq.spawn(len(self.asset.channels) + 2)
        common = np.random.default_rng(channel_seqs[-1])
        shaft_phase = float(common.uniform(0.0, 2.0 * np.pi))
        line_phase = float(common.uniform(0.0, 2.0 * np.pi))
        scatter = float(np.exp(0.08 * common.standard_normal()))
        ctx = _WindowContext(
            state=state,
            fault=fault,
            severity=severity,
            shaft_phase=shaft_phase,
            line_phase=line_phase,
            scatter=scatter,
        )
        samples: dict[str, FloatArray] = {}
        streams = channel_seqs[: len(self.asset.channels)]
        for c, child in zip(self.asset.channels, streams, strict=True):
            n = round(c.fs_hz * c.window_s)
            samples[c.name] = self._generators[c.kind](c, n, ctx, np.random.default_rng(child))

        active = self.scenario.active_sensor_faults(t)
        fault_rng = np.random.default_rng(channel_seqs[-2])
        for event in active:
            c = self.asset.channel(event.channel)
            drift = (
                event.drift_per_day
                if event.drift_per_day is not None
                else DEFAULT_DRIFT_PER_DAY[c.kind]
            )
            samples[c.name] = apply_sensor_fault(
                samples[c.name],
                kind=event.kind,
                rng=fault_rng,
                elapsed_days=(t - event.start) / timedelta(days=1),
                drift_per_day=drift,
            )

        channels = {
            c.name: ChannelWindow(
                channel=c.name, kind=c.kind, fs=c.fs_hz, samples=samples[c.name], unit=c.unit
            )
            for c in self.asset.channels
        }
        first = active[0] if active else None
        labels: dict[str, object] = {
            "fault": fault,
            "severity": severity,
            "sensor_fault": first.kind if first else None,
            "sensor_fault_channel": first.channel if first else None,
            "sensor_faults": {e.channel: e.kind for e in active},
            "shaft_speed_hz": state.shaft_hz,
            "faulty_bearing": self.scenario.bearing if fault in BEARING_FAULTS else None,
            "cavitation_intensity": state.cavitation_intensity,
        }
        process = {
            "drive_speed_rpm": state.drive_speed_rpm,
            "flow_m3_per_h": state.flow_m3_per_h,
            "fluid_temperature_c": state.fluid_temperature_c,
        }
        return WindowSet(
            asset_id=self.asset.asset_id,
            start=t,
            channels=channels,
            process=process,
            labels=labels,
        )

    def windows(
        self, start: datetime, end: datetime, *, interval: timedelta
    ) -> Iterator[WindowSet]:
        """Window sets every ``interval`` from ``start`` (inclusive) to ``end`` (exclusive).

        Arguments are checked at the call, before the first window is made.
        """
        start = require_utc(start, "start")
        end = require_utc(end, "end")
        if interval <= timedelta(0):
            raise ValueError(f"interval must be positive, got {interval!r}")

        def generate() -> Iterator[WindowSet]:
            t = start
            while t < end:
                yield self.window(t)
                t += interval

        return generate()

    # ------------------------------------------------------------------ channels
    def _accel_channel(
        self, c: ChannelConfig, n: int, ctx: _WindowContext, rng: np.random.Generator
    ) -> FloatArray:
        tr = self._accel[c.name]
        st, fault, sev = ctx.state, ctx.fault, ctx.severity
        fs = c.fs_hz
        fr = st.shaft_hz
        s = fr * 60.0 / self.hydraulics.pump.nominal_speed_rpm
        same_bearing = c.bearing == self.scenario.bearing

        # shaft-order lines: healthy residuals plus fault growth, as complex velocity phasors
        phasor = tr.line_velocity * np.exp(1j * tr.line_phase)
        orders = self._orders
        grow = np.zeros(_N_LINES)
        if fault == "imbalance":
            grow[0] = (4.2 if c.bearing != "nde" else 3.4) * sev
        elif fault == "misalignment":
            grow[:3] = np.array([1.0, 3.6 if c.bearing != "nde" else 2.6, 0.8]) * sev
        elif fault == "impeller_wear":
            grow[0] = 0.6 * sev
            phasor[3] *= 1.0 + 2.5 * sev
            phasor[4] *= 1.0 + 1.5 * sev
        elif fault == "cavitation":
            phasor[3] *= 1.0 + 0.5 * st.cavitation_intensity
        elif fault in BEARING_FAULTS:
            # late in life the damaged bearing loosens: running-speed harmonics rise
            loose = sev * sev * (1.0 if same_bearing or c.bearing is None else 0.5)
            grow[:3] = np.array([1.2, 0.9, 0.6]) * loose
        phasor = phasor + ctx.scatter * grow * np.exp(1j * tr.fault_phase)
        # hydraulic and unbalance forces scale with speed^2: acceleration ~ s^2, velocity ~ s
        amp = physics.velocity_to_accel_peak_g(np.abs(phasor) * s, orders * fr)
        audible = orders * fr < fs / 2
        coeff = np.where(audible, amp, 0.0) * np.exp(1j * np.angle(phasor))
        powers, magnetic = ctx.shaft_basis(fs, n, self.asset.vane_count)
        x = np.zeros(n)
        for k in range(_N_LINES):  # Im(c z^k), without BLAS threads for five terms
            x += coeff[k].real * powers[k].imag + coeff[k].imag * powers[k].real
        # motor magnetic line at twice line frequency
        x += physics.velocity_to_accel_peak_g(0.06 * s, 2.0 * st.electrical_hz) * magnetic

        # bearing: background noise and defect impulses ringing the housing resonance
        m = n + _PREROLL
        bearing_fault = fault in BEARING_FAULTS
        background = tr.background_g * s**1.5
        if bearing_fault:
            background *= 1.0 + 3.0 * sev * sev
        excitation = (background * tr.excitation_scale) * rng.standard_normal(m)
        if bearing_fault and sev > 0:
            transmission = 1.0 if same_bearing or c.bearing is None else 0.25
            geometry = self.asset.bearings[self.scenario.bearing]
            freqs = physics.bearing_defect_frequencies(geometry, fr)
            rate, mod_hz, floor, gain = {
                "outer_race": (freqs.bpfo_hz, 0.0, 1.0, 1.0),
                "inner_race": (freqs.bpfi_hz, fr, 0.1, 1.0),
                "rolling_element": (2.0 * freqs.bsf_hz, freqs.ftf_hz, 0.1, 0.8),
                "cage": (freqs.ftf_hz, 0.0, 1.0, 0.6),
            }[fault]
            excitation += physics.impulse_train(
                m,
                fs,
                rate_hz=rate,
                amplitude=self._defect_peak_g * sev * s * transmission * gain * ctx.scatter,
                rng=rng,
                slip=self._slip,
                modulation_hz=mod_hz,
                modulation_phase_rad=float(rng.uniform(0.0, 2.0 * np.pi)),
                modulation_floor=floor,
            )
            if fault == "cage":
                cage_g = physics.velocity_to_accel_peak_g(1.5 * sev * s, freqs.ftf_hz)
                x += cage_g * np.sin(
                    2.0 * np.pi * freqs.ftf_hz / fs * np.arange(n) + ctx.line_phase
                )
        rung = signal.lfilter(tr.b, tr.a, excitation)[_PREROLL:]
        x += rung
        if st.cavitation_intensity > 0:
            coupling = 1.0 if c.bearing == "nde" else 0.7
            x += physics.cavitation_noise(
                n, fs, intensity=st.cavitation_intensity, rng=rng, peak_g=1.2 * coupling * s**2
            )
        x += tr.floor_g * rng.standard_normal(n)
        return np.asarray(x, dtype=float)

    def _pressure_channel(
        self, c: ChannelConfig, n: int, ctx: _WindowContext, rng: np.random.Generator
    ) -> FloatArray:
        st, fault, sev = ctx.state, ctx.fault, ctx.severity
        fs = c.fs_hz
        t = np.arange(n) / fs
        vane_hz = self.asset.vane_count * st.shaft_hz
        dp = st.discharge_kpa - st.suction_kpa
        cav = st.cavitation_intensity
        wear = sev if fault == "impeller_wear" else 0.0
        vane_angle = 2.0 * np.pi * vane_hz * t + self.asset.vane_count * ctx.shaft_phase
        if "discharge" in c.name:
            mean = st.discharge_kpa
            pulsation = 0.01 * dp * (1.0 + 2.5 * wear) * (1.0 + 0.5 * cav)
            turbulence = (
                0.004 * dp * (0.5 + st.flow_m3_per_h / self.hydraulics.pump.bep_flow_m3_per_h)
            )
            turbulence += 0.02 * dp * cav
            ripple = 0.002 * dp
        else:
            mean = st.suction_kpa
            pulsation = 0.002 * dp * (1.0 + wear)
            turbulence = 0.4 + 4.0 * cav
            ripple = 0.0
        x = mean + (pulsation if vane_hz < fs / 2 else 0.0) * np.sin(vane_angle)
        if ripple and st.shaft_hz < fs / 2:
            x += ripple * np.sin(2.0 * np.pi * st.shaft_hz * t + ctx.shaft_phase)
        x += math.hypot(turbulence, 0.3) * rng.standard_normal(n)  # flow noise + transducer
        return np.asarray(x, dtype=float)

    def _current_channel(
        self, c: ChannelConfig, n: int, ctx: _WindowContext, rng: np.random.Generator
    ) -> FloatArray:
        st, fault, sev = ctx.state, ctx.fault, ctx.severity
        t = np.arange(n) / c.fs_hz
        peak = math.sqrt(2.0) * st.current_rms_a
        depth = 0.004 + (0.02 * sev if fault in ("imbalance", "misalignment") else 0.0)
        envelope = 1.0 + depth * np.cos(2.0 * np.pi * st.shaft_hz * t + ctx.shaft_phase)
        theta = 2.0 * np.pi * st.electrical_hz * t + ctx.line_phase
        x = peak * envelope * np.sin(theta)
        for harmonic, share in ((5, 0.03), (7, 0.02)):
            if harmonic * st.electrical_hz < c.fs_hz / 2:
                x += share * peak * np.sin(harmonic * theta)
        return np.asarray(x + 0.2 * rng.standard_normal(n), dtype=float)

    def _temperature_channel(
        self, c: ChannelConfig, n: int, ctx: _WindowContext, rng: np.random.Generator
    ) -> FloatArray:
        return ctx.state.bearing_temp_c + 0.05 * rng.standard_normal(n)

    def _tacho_channel(
        self, c: ChannelConfig, n: int, ctx: _WindowContext, rng: np.random.Generator
    ) -> FloatArray:
        turns = ctx.state.shaft_hz * np.arange(n) / c.fs_hz + ctx.shaft_phase / (2.0 * np.pi)
        return np.where(np.mod(turns, 1.0) < 0.02, 5.0, 0.0) + 0.01 * rng.standard_normal(n)


def _integer_power(z: npt.NDArray[np.complex128], k: int) -> npt.NDArray[np.complex128]:
    """``z**k`` for a whole ``k >= 0`` by square-and-multiply."""
    result = np.ones_like(z)
    base = z
    while k:
        if k & 1:
            result = result * base
        k >>= 1
        if k:
            base = base * base
    return result


@dataclass(slots=True)
class _WindowContext:
    state: OperatingState
    fault: str
    severity: float
    shaft_phase: float
    line_phase: float
    scatter: float
    _basis: dict[tuple[float, int], tuple[npt.NDArray[np.complex128], FloatArray]] = field(
        default_factory=dict
    )

    def shaft_basis(
        self, fs: float, n: int, vanes: int
    ) -> tuple[npt.NDArray[np.complex128], FloatArray]:
        """Shaft-angle phasors ``exp(1j k theta)`` for k = 1, 2, 3, vanes, 2 vanes, shape
        (5, n), and the unit magnetic line at twice line frequency, shared by every channel at
        rate ``fs``; powers by multiplication, which is cheaper than more sines."""
        key = (fs, n)
        if key not in self._basis:
            angle = (2.0 * np.pi * self.state.shaft_hz / fs) * np.arange(n) + self.shaft_phase
            powers = np.empty((_N_LINES, n), dtype=complex)
            z = powers[0]
            np.cos(angle, out=z.real)
            np.sin(angle, out=z.imag)
            np.multiply(z, z, out=powers[1])
            np.multiply(powers[1], z, out=powers[2])
            powers[3] = _integer_power(z, vanes)
            np.multiply(powers[3], powers[3], out=powers[4])
            line = (4.0 * np.pi * self.state.electrical_hz / fs) * np.arange(n) + self.line_phase
            self._basis[key] = (powers, np.sin(line))
        return self._basis[key]


def saltbush_simulators(
    *, seed: int = 2026, start: datetime = DEMO_START, window_s: float = 1.0
) -> dict[str, PumpSimulator]:
    """A simulator for each of the twelve Saltbush Flats pumps with the demo scenarios."""
    scenarios = saltbush_scenarios(start, seed=seed)
    return {
        asset_id: PumpSimulator(
            saltbush_asset(asset_id, window_s=window_s), scenarios[asset_id], seed=seed
        )
        for asset_id in SALTBUSH_ASSET_IDS
    }
