"""Evidence rules: what one window says about each failure mode, in plain words with numbers.

Each rule compares one asset's indicators with its own healthy baseline at the same operating
regime and, when the comparison clears both a fixed threshold and three baseline spreads, states
what it saw as an :class:`Evidence` item: the failure mode, a strength in [0, 1] and a sentence
such as "drive-end envelope line at 3.58× shaft speed (105 Hz), the outer race defect frequency
(BPFO), 14 dB over baseline".

Rules and their basis
---------------------
* Bearing defects: a line in the squared-envelope spectrum at a defect frequency (BPFO, BPFI,
  BSF or 2×BSF, FTF) rising over its baseline. Randall & Antoni (2011). Strength 0 at a 6 dB
  rise, 1 at 20 dB (thresholds: common practice, no source).
* Imbalance: 1× radial vibration rising over its baseline; strength 0 at 1.5×, 1 at 3×
  (common practice, no source). Halved when 2× rose more than 1× (that pattern points to
  misalignment).
* Misalignment: 2× running-speed vibration rising, full weight when 2× exceeds 1× (common
  practice, no source); strength 0 at 1.5×, 1 at 3× its baseline.
* Cavitation: high-band (kHz) vibration energy rising together with a fall in suction pressure;
  either alone counts less, because bearing damage also raises high-band energy and a fall in
  suction pressure alone is a restricted suction that has not started to cavitate yet (common
  practice, no source). Strength from 3-12 dB of high-band rise and from a suction fall of 2-15 %
  of the pump's differential pressure.
* Impeller wear: differential pressure (discharge - suction) below baseline at the same speed
  (the baseline is scaled to the current speed by the pump affinity laws, head ∝ n², common
  practice), with vane-pass pulsation rising; strength 0 at 2 %, 1 at 8 % head loss.

Evidence is advisory: it supports, and does not replace, inspection by qualified personnel, and
alarms derived from it do not replace protective trips.

References
----------
.. [1] R. B. Randall, J. Antoni, "Rolling element bearing diagnostics - a tutorial", Mech. Syst.
   Signal Process. 25 (2011) 485-520 (from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from prognosis_service.diagnosis.baseline import IndicatorBaseline

__all__ = [
    "BEARING_LINES",
    "DIAGNOSED_MODES",
    "Evidence",
    "gather_evidence",
    "mode_strengths",
]

DIAGNOSED_MODES: tuple[str, ...] = (
    "healthy",
    "outer_race",
    "inner_race",
    "rolling_element",
    "cage",
    "imbalance",
    "misalignment",
    "cavitation",
    "impeller_wear",
)
"""Fault modes the diagnosis knows (the vocabulary of ``shared_schema.FaultMode`` minus "other")."""

BEARING_LINES: dict[str, tuple[str, str]] = {
    "bpfo": ("outer_race", "the outer race defect frequency (BPFO)"),
    "bpfi": ("inner_race", "the inner race defect frequency (BPFI)"),
    "bsf": ("rolling_element", "the rolling element spin frequency (BSF) or twice it"),
    "ftf": ("cage", "the cage frequency (FTF)"),
}
"""Envelope indicator suffix -> (fault mode, plain description of the line)."""

_MIN_Z = 3.0  # a change must exceed this many baseline spreads to count
_ENV_DB = (6.0, 20.0)
_ORDER_RATIO = (1.5, 3.0)
_HIGH_BAND_DB = (3.0, 12.0)
_SUCTION_FRACTION = (0.02, 0.15)
_HEAD_LOSS = (0.02, 0.08)
_VANE_PASS_RATIO = 1.3
_SAME_SPEED = 0.02  # speeds within 2 % are "the same speed"
_RANDALL = "Randall & Antoni 2011"
_PRACTICE = "common practice, no source"


@dataclass(frozen=True)
class Evidence:
    """One finding for one failure mode.

    Attributes
    ----------
    mode : str
        The failure mode the finding supports (one of :data:`DIAGNOSED_MODES`).
    strength : float
        How strongly it supports the mode, in [0, 1].
    sentence : str
        The finding in plain words with its numbers.
    indicators : tuple of str
        The indicators the finding rests on.
    basis : str
        Where the rule comes from ("Randall & Antoni 2011", "common practice, no source").
    measures : dict of str to float
        The numbers in the sentence, for machines (``rise_db``, ``ratio``, ``drop_kpa``, ...).
    """

    mode: str
    strength: float
    sentence: str
    indicators: tuple[str, ...]
    basis: str
    measures: dict[str, float] = field(default_factory=dict)


def _ramp(value: float, low: float, high: float) -> float:
    return float(min(max((value - low) / (high - low), 0.0), 1.0))


def _where(channel: str) -> str:
    if channel.startswith("nde"):
        return "non-drive-end"
    if channel.startswith("de"):
        return "drive-end"
    return channel.replace("_", " ")


def _check_orders(orders: Mapping[str, float], where: str) -> dict[str, float]:
    out: dict[str, float] = {}
    for key, value in orders.items():
        if key not in BEARING_LINES:
            raise ValueError(
                f"defect_orders{where} keys must be among {sorted(BEARING_LINES)}; got {key!r}"
            )
        v = float(value)
        if not (math.isfinite(v) and v > 0):
            raise ValueError(
                f"defect_orders{where}[{key!r}] must be a multiple of shaft speed > 0; "
                f"got {value!r}"
            )
        out[key] = v
    return out


def _orders_by_channel(
    defect_orders: Mapping[str, object] | None, channels: list[str]
) -> dict[str, dict[str, float]]:
    if not defect_orders:
        return {}
    if all(not isinstance(v, Mapping) for v in defect_orders.values()):
        flat = _check_orders(defect_orders, "")  # type: ignore[arg-type]
        return dict.fromkeys(channels, flat)
    out: dict[str, dict[str, float]] = {}
    for channel, orders in defect_orders.items():
        if not isinstance(orders, Mapping):
            raise ValueError(
                "defect_orders must be either {'bpfo': 3.58, ...} for every accelerometer or "
                f"{{channel: {{'bpfo': 3.58, ...}}}} per channel; got {defect_orders!r}"
            )
        out[channel] = _check_orders(orders, f"[{channel!r}]")
    return out


class _Window:
    """Indicator values and their baseline, looked up by name; NaN where unknown."""

    def __init__(self, values: Mapping[str, float | None], baseline: IndicatorBaseline) -> None:
        self.values = values
        self.index = {n: i for i, n in enumerate(baseline.names)}
        self.baseline = baseline

    def x(self, name: str) -> float:
        v = self.values.get(name)
        return float(v) if v is not None and math.isfinite(float(v)) else math.nan

    def m(self, name: str) -> float:
        i = self.index.get(name)
        return float(self.baseline.median[i]) if i is not None else math.nan

    def s(self, name: str) -> float:
        i = self.index.get(name)
        return float(self.baseline.spread[i]) if i is not None else math.nan

    def beyond_spread(self, name: str, change: float) -> bool:
        """``change`` (in the indicator's unit) exceeds the baseline scatter, if known."""
        spread = self.s(name)
        return not (math.isfinite(spread) and spread > 0) or change >= _MIN_Z * spread

    def ratio(self, name: str) -> float:
        x, m = self.x(name), self.m(name)
        return x / m if math.isfinite(x) and math.isfinite(m) and m > 0 else math.nan


def _line_rise(w: _Window, name: str) -> float:
    """Rise of an envelope line over its baseline, dB; NaN unless it counts as a finding."""
    x, m = w.x(name), w.m(name)
    if not (math.isfinite(x) and math.isfinite(m)):
        return math.nan
    rise = x - m
    if rise < _ENV_DB[0] or x < _ENV_DB[0] or not w.beyond_spread(name, rise):
        return math.nan
    return rise


def _bearing_evidence(
    w: _Window, channel: str, orders: Mapping[str, float], shaft_hz: float | None
) -> list[Evidence]:
    rises = {line: _line_rise(w, f"{channel}.env_{line}") for line in BEARING_LINES}
    found = {line: r for line, r in rises.items() if math.isfinite(r)}
    out = []
    for line, rise in found.items():
        mode, label = BEARING_LINES[line]
        name = f"{channel}.env_{line}"
        x = w.x(name)
        strength = _ramp(rise, *_ENV_DB)
        note = ""
        # Lines of one defect show up at other defect frequencies too (kinematics, eqs. 1-4 of
        # Randall & Antoni 2011): BPFO = n x FTF, so a cage defect's harmonics reach BPFO; a
        # rolling element passes the load zone at FTF, so its lines come with FTF modulation
        # and sidebands that can land near BPFI. The secondary line counts half.
        if line == "bpfo" and found.get("ftf", -math.inf) > rise:
            strength *= 0.5
            note = " (BPFO is a harmonic of the cage frequency, which rose more)"
        elif line in ("ftf", "bpfi") and "bsf" in found:
            strength *= 0.5
            note = " (may be the cage-rate modulation of the rolling element line)"
        measures = {"rise_db": rise, "level_db": x}
        where = f"{_where(channel)} envelope line at "
        mult = orders.get(line)
        if mult is not None:
            at = f"{mult:.2f}×" if line != "bsf" else f"{mult:.2f}× or {2 * mult:.2f}×"
            hz = f" ({mult * shaft_hz:.0f} Hz)" if shaft_hz and line != "bsf" else ""
            where += f"{at} shaft speed{hz}, "
            measures["multiple_of_shaft_speed"] = mult
        sentence = f"{where}{label}, {rise:.0f} dB over baseline{note}"
        out.append(Evidence(mode, strength, sentence, (name,), _RANDALL, measures))
    return out


def _order_evidence(w: _Window, channel: str) -> list[Evidence]:
    n1, n2 = f"{channel}.order_1x", f"{channel}.order_2x"
    x1, x2 = w.x(n1), w.x(n2)
    r1, r2 = w.ratio(n1), w.ratio(n2)
    where = _where(channel)
    out = []
    if math.isfinite(r1) and r1 >= _ORDER_RATIO[0] and w.beyond_spread(n1, x1 - w.m(n1)):
        strength = _ramp(r1, *_ORDER_RATIO)
        if math.isfinite(r2) and r2 > r1:
            strength *= 0.5
        out.append(
            Evidence(
                "imbalance",
                strength,
                f"{where} 1× running-speed vibration {r1:.1f}× its baseline ({x1:.2f} mm/s "
                f"against {w.m(n1):.2f} mm/s) (imbalance: 1× radial vibration, {_PRACTICE})",
                (n1,),
                _PRACTICE,
                {"ratio": r1, "velocity_mm_s": x1},
            )
        )
    if math.isfinite(r2) and r2 >= _ORDER_RATIO[0] and w.beyond_spread(n2, x2 - w.m(n2)):
        above = math.isfinite(x1) and x2 > x1
        strength = _ramp(r2, *_ORDER_RATIO) * (1.0 if above else 0.5)
        relation = "above" if above else "below"
        out.append(
            Evidence(
                "misalignment",
                strength,
                f"{where} 2× running speed {x2:.2f} mm/s, {relation} 1× ({x1:.2f} mm/s), "
                f"{r2:.1f}× its baseline (misalignment: 2× above 1×, {_PRACTICE})",
                (n2, n1),
                _PRACTICE,
                {"ratio": r2, "velocity_mm_s": x2, "order_1x_mm_s": x1},
            )
        )
    return out


def _cavitation_evidence(w: _Window, accel: list[str]) -> list[Evidence]:
    best_db, best_name = -math.inf, ""
    for channel in accel:
        name = f"{channel}.high_band_rms"
        r = w.ratio(name)
        if math.isfinite(r) and r > 0 and w.beyond_spread(name, w.x(name) - w.m(name)):
            db = 20.0 * math.log10(r)
            if db > best_db:
                best_db, best_name = db, name
    s_hb = _ramp(best_db, *_HIGH_BAND_DB) if best_name else 0.0

    ns, nd = "suction_pressure.mean", "discharge_pressure.mean"
    drop = w.m(ns) - w.x(ns)
    head = w.m(nd) - w.m(ns)
    fraction = drop / head if math.isfinite(drop) and math.isfinite(head) and head > 0 else math.nan
    s_suc = 0.0
    if math.isfinite(fraction) and w.beyond_spread(ns, drop):
        s_suc = _ramp(fraction, *_SUCTION_FRACTION)

    if s_hb > 0 and s_suc > 0:
        return [
            Evidence(
                "cavitation",
                min(1.0, s_hb + s_suc),
                f"high-band energy up {best_db:.0f} dB with suction pressure {drop:.0f} kPa "
                "below baseline (cavitation)",
                (best_name, ns),
                _PRACTICE,
                {"high_band_rise_db": best_db, "suction_drop_kpa": drop},
            )
        ]
    if s_hb > 0:
        where = _where(best_name.split(".", 1)[0])
        return [
            Evidence(
                "cavitation",
                0.5 * s_hb,
                f"high-band energy up {best_db:.0f} dB at the {where} without a fall in suction "
                "pressure (possible cavitation; bearing damage also raises it)",
                (best_name,),
                _PRACTICE,
                {"high_band_rise_db": best_db},
            )
        ]
    if s_suc > 0:
        return [
            Evidence(
                "cavitation",
                0.8 * s_suc,
                f"suction pressure {drop:.0f} kPa below baseline ({100 * fraction:.0f} % of the "
                "pump's differential pressure) without high-band noise yet (restricted suction, "
                "cavitation risk)",
                (ns,),
                _PRACTICE,
                {"suction_drop_kpa": drop, "fraction_of_differential": fraction},
            )
        ]
    return []


def _impeller_evidence(
    w: _Window, accel: list[str], shaft_hz: float | None, baseline_hz: float | None
) -> list[Evidence]:
    nd, ns = "discharge_pressure.mean", "suction_pressure.mean"
    same_speed = True
    affinity = 1.0
    if shaft_hz and baseline_hz:
        affinity = (shaft_hz / baseline_hz) ** 2
        same_speed = abs(shaft_hz / baseline_hz - 1.0) <= _SAME_SPEED
    head0 = (w.m(nd) - w.m(ns)) * affinity
    head = w.x(nd) - w.x(ns)
    loss = 1.0 - head / head0 if math.isfinite(head) and math.isfinite(head0) and head0 > 0 else 0.0
    vp_names = [f"{c}.vane_pass" for c in accel] + ["discharge_pressure.vane_pass"]
    vp_ratios = [(w.ratio(n), n) for n in vp_names if math.isfinite(w.ratio(n))]
    vp, vp_name = max(vp_ratios) if vp_ratios else (math.nan, "")
    vp_up = math.isfinite(vp) and vp >= _VANE_PASS_RATIO
    # No spread gate here: the baseline's pressure scatter is mostly speed scatter within the
    # regime, which the affinity scaling already removes.
    if loss >= _HEAD_LOSS[0]:
        # what the discharge would read on today's suction with the baseline's head
        discharge_pct = 100.0 * (1.0 - w.x(nd) / (w.x(ns) + head0))
        speed_text = (
            "at the same speed"
            if same_speed
            else "after scaling the baseline to the current speed (affinity laws)"
        )
        vp_text = f", vane-pass pulsation up {vp:.1f}×" if vp_up else ", vane-pass pulsation steady"
        return [
            Evidence(
                "impeller_wear",
                _ramp(loss, *_HEAD_LOSS) * (1.0 if vp_up else 0.6),
                f"discharge pressure {discharge_pct:.0f} % below baseline {speed_text} "
                f"(differential pressure {100 * loss:.0f} % down){vp_text} (impeller wear)",
                (nd, ns, vp_name) if vp_up else (nd, ns),
                _PRACTICE,
                {"head_loss_fraction": loss, "discharge_drop_percent": discharge_pct}
                | ({"vane_pass_ratio": vp} if vp_up else {}),
            )
        ]
    return []


def gather_evidence(
    values: Mapping[str, float | None],
    baseline: IndicatorBaseline,
    *,
    shaft_speed_hz: float | None = None,
    defect_orders: Mapping[str, object] | None = None,
) -> list[Evidence]:
    """Evidence per failure mode from one window compared with its healthy baseline.

    Parameters
    ----------
    values : mapping of str to float or None
        The window's indicators by name, e.g. ``message.values_by_name(layout)``.
    baseline : IndicatorBaseline
        The same asset's healthy baseline at the window's operating regime.
    shaft_speed_hz : float, optional
        The window's shaft speed, Hz (puts the defect lines in Hz in the sentences and scales
        the pressure baseline by the affinity laws).
    defect_orders : mapping, optional
        Bearing defect frequencies as multiples of shaft speed, from the asset registry:
        ``{"bpfo": 3.58, "bpfi": 5.42, "bsf": 2.36, "ftf": 0.40}`` for every accelerometer, or
        ``{"de_accel": {...}, "nde_accel": {...}}`` per channel. Without them the sentences
        name the line but not its multiple.

    Returns
    -------
    list of Evidence
        Strongest first; empty when nothing departs from the baseline.

    Examples
    --------
    >>> import numpy as np
    >>> names = ("de_accel.env_bpfo", "de_accel.order_1x")
    >>> b = IndicatorBaseline(names, np.array([3.0, 0.8]), np.array([1.0, 0.05]))
    >>> ev = gather_evidence({"de_accel.env_bpfo": 17.0, "de_accel.order_1x": 0.8}, b,
    ...                      shaft_speed_hz=29.5, defect_orders={"bpfo": 3.58})
    >>> ev[0].mode
    'outer_race'
    >>> ev[0].sentence.split(", ")[0]
    'drive-end envelope line at 3.58× shaft speed (106 Hz)'
    >>> ev[0].sentence.split(", ")[-1]
    '14 dB over baseline'
    """
    if shaft_speed_hz is not None and not (math.isfinite(shaft_speed_hz) and shaft_speed_hz > 0):
        raise ValueError(
            f"shaft_speed_hz must be a finite number > 0 or None; got {shaft_speed_hz!r}"
        )
    w = _Window(values, baseline)
    names = list(dict.fromkeys(list(values) + list(baseline.names)))
    accel = sorted(
        {n.split(".", 1)[0] for n in names if n.split(".", 1)[-1].startswith(("env_", "order_"))}
    )
    orders = _orders_by_channel(defect_orders, accel)
    evidence: list[Evidence] = []
    for channel in accel:
        evidence += _bearing_evidence(w, channel, orders.get(channel, {}), shaft_speed_hz)
        evidence += _order_evidence(w, channel)
    evidence += _cavitation_evidence(w, accel)
    evidence += _impeller_evidence(w, accel, shaft_speed_hz, baseline.shaft_speed_hz)
    return sorted(evidence, key=lambda e: -e.strength)


def mode_strengths(evidence: list[Evidence]) -> dict[str, float]:
    """The strongest evidence per failure mode (modes without evidence are left out)."""
    out: dict[str, float] = {}
    for e in evidence:
        out[e.mode] = max(out.get(e.mode, 0.0), float(np.clip(e.strength, 0.0, 1.0)))
    return out
