"""The design's optional tables: ``[requirements]``, ``[disturbance]``, ``[actuator]`` and
``[limits]`` (read by :mod:`.loader`; same error conventions: a
:class:`~loopwarden.errors.DesignError` naming the file, the table and the key).

A new ``[requirements]`` key is one line of :data:`REQUIREMENTS` (its unit and range) plus
the check that reads it (its catalog entry declares the key, see DEVELOPERS.md).
"""

from __future__ import annotations

from types import MappingProxyType

from .forms import Table
from .model import Actuator, Disturbance, Requirements, Stage, default_tracking_time

__all__ = ["REQUIREMENTS", "read_actuator", "read_disturbance", "read_limits",
           "read_requirements"]

#: [requirements] keys → (kind, lower bound, exclusive?, upper bound, exclusive?).
#: kind "frequency" values are converted from Hz when the file says so.
REQUIREMENTS: dict[str, tuple[str, float, bool, float | None, bool]] = {
    "reference_band": ("frequency", 0.0, True, None, False),
    "settling_time": ("s", 0.0, True, None, False),
    "settling_band": ("fraction", 0.0, True, 0.5, True),
    "overshoot": ("%", 0.0, False, None, False),
    "rise_time": ("s", 0.0, True, None, False),
    "phase_margin": ("deg", 0.0, True, 180.0, False),
    "gain_margin": ("dB", 0.0, True, None, False),
    "delay_margin": ("s", 0.0, True, None, False),
    # |S| → 1 at high frequency for a strictly proper loop, so Ms below 1 cannot be met.
    "peak_sensitivity": ("", 1.0, False, None, False),
    "peak_complementary": ("", 0.0, True, None, False),
    "crossover_min": ("frequency", 0.0, True, None, False),
    "crossover_max": ("frequency", 0.0, True, None, False),
    "step_error": ("", 0.0, False, None, False),
    "ramp_error": ("", 0.0, False, None, False),
    # Load disturbance, noise and effort (in the units of the disturbed / actuator signal).
    "disturbance_peak": ("", 0.0, True, None, False),
    "disturbance_iae": ("", 0.0, True, None, False),
    "disturbance_recovery_time": ("s", 0.0, True, None, False),
    "noise_gain_max": ("", 0.0, True, None, False),
    "actuator_limit": ("", 0.0, True, None, False),
    # Actuator saturation ([actuator] table): the saturated reference step.
    "saturated_settling_time": ("s", 0.0, True, None, False),
    "windup_cost_max": ("s", 0.0, False, None, False),
}
_LIMIT_KEYS = ("min", "max", "warn_min", "warn_max")


# ---------------------------------------------------------------------- requirements
def read_requirements(t: Table) -> Requirements:
    t.check_keys(tuple(REQUIREMENTS))
    values: dict[str, float] = {}
    for key in t.data:
        kind, low, low_open, high, high_open = REQUIREMENTS[key]
        if kind == "frequency":
            values[key] = t.frequency(key)
            continue
        values[key] = t.number(key, above=low if low_open else None,
                               minimum=None if low_open else low,
                               below=high if high is not None and high_open else None,
                               maximum=high if high is not None and not high_open else None,
                               unit=kind if kind not in ("fraction",) else "")
    if ("crossover_min" in values and "crossover_max" in values
            and not values["crossover_min"] < values["crossover_max"]):
        raise t.error("crossover_max", "expected crossover_max above crossover_min")
    return Requirements(
        reference_band_rad_s=values.get("reference_band"),
        settling_time_s=values.get("settling_time"),
        settling_band=values.get("settling_band"),
        values=MappingProxyType(dict(sorted(values.items()))),
    )


# ---------------------------------------------------------------------- disturbance
def read_disturbance(t: Table) -> Disturbance:
    """``[disturbance]``: where a step load enters, its size and its frequency band."""
    t.check_keys(("at", "size", "band"))
    at = t.choice("at", ("plant_input", "plant_output"), default="plant_input")
    size = t.number("size", nonzero=True, default=1.0)
    band = t.frequency("band") if t.has("band") else None
    return Disturbance(at=at, size=size, band_rad_s=band)


# ---------------------------------------------------------------------- actuator
_ANTI_WINDUP = ("none", "clamping", "back_calculation")


def read_actuator(t: Table, controller: tuple[Stage, ...]) -> Actuator:
    """``[actuator]``: min/max or a symmetric limit, rate limit, anti-windup."""
    t.check_keys(("min", "max", "limit", "rate_limit", "anti_windup", "tracking_time",
                  "step"))
    if t.has("limit"):
        both = next((k for k in ("min", "max") if t.has(k)), None)
        if both is not None:
            raise t.error(both, f"both 'limit' and '{both}' are given",
                          "give either limit (symmetric, ±limit) or min and max")
        high = t.number("limit", above=0.0)
        low = -high
    else:
        missing = next((k for k in ("min", "max") if not t.has(k)), None)
        if missing is not None:
            raise t.error(missing, f"missing required key '{missing}'",
                          "give min and max, or a symmetric limit = ... (±limit)")
        low, high = t.number("min"), t.number("max")
        for key, value, bad in (("min", low, low > 0), ("max", high, high < 0)):
            if bad:
                raise t.error(key, f"expected {key} {'≤' if key == 'min' else '≥'} 0, got "
                              f"{value:g}", "the limits are deviations of u from the "
                              "operating point of the linear model (u = 0 at rest)")
        if not low < high:
            raise t.error("max", f"expected max above min, got min = {low:g} and "
                          f"max = {high:g}")
    rate = t.number("rate_limit", above=0.0, unit="1/s") if t.has("rate_limit") else None
    scheme = t.choice("anti_windup", _ANTI_WINDUP, default="none")
    tt = None
    if t.has("tracking_time"):
        if scheme != "back_calculation":
            raise t.error("tracking_time", "tracking_time applies only to "
                          'anti_windup = "back_calculation"',
                          "remove tracking_time or choose back-calculation")
        tt = t.number("tracking_time", above=0.0, unit="s")
    elif scheme == "back_calculation" and default_tracking_time(controller) is None:
        raise t.error("tracking_time", "missing required key 'tracking_time'",
                      "the default (√(ti·td), or ti) needs a pi or pid stage; give the "
                      "back-calculation time constant in seconds")
    step = t.number("step", nonzero=True, default=1.0)
    return Actuator(min_value=low, max_value=high, rate_limit_per_s=rate,
                    anti_windup=scheme, tracking_time_s=tt, step=step)


# ---------------------------------------------------------------------- limits and waivers
def read_limits(t: Table) -> MappingProxyType[str, MappingProxyType[str, float]]:
    out: dict[str, MappingProxyType[str, float]] = {}
    for rule_id, value in t.data.items():
        where = f'{t.where}."{rule_id}"'
        lt = Table(value if isinstance(value, dict) else {}, where, t.file, t.hz)
        if not isinstance(value, dict):
            raise lt.error(None, "expected a table of limits (min, max, warn_min, warn_max)",
                           f'write [limits."{rule_id}"] and then min = ... on the next line')
        nested = [k for k, v in value.items() if isinstance(v, dict)]
        if nested:
            raise lt.error(None, f"unknown key '{nested[0]}' (a table, not a limit)",
                           f'quote a dotted rule id: [limits."{rule_id}.{nested[0]}"]')
        lt.check_keys(_LIMIT_KEYS)
        if not value:
            raise lt.error(None, "the table sets no limit",
                           "set at least one of min, max, warn_min, warn_max")
        lim = {k: lt.number(k) for k in _LIMIT_KEYS if k in value}
        _check_limit_order(lt, lim)
        out[rule_id] = MappingProxyType(lim)
    return MappingProxyType(out)


def _check_limit_order(t: Table, lim: dict[str, float]) -> None:
    # A rule fails below min and warns below warn_min, so the warning band must lie inside
    # the passing range; equal fail limits would let nothing pass.
    orders = (("min", "max", True), ("warn_min", "warn_max", True),
              ("min", "warn_min", False), ("warn_max", "max", False))
    for lo, hi, strict in orders:
        if lo in lim and hi in lim and (lim[lo] >= lim[hi] if strict else lim[lo] > lim[hi]):
            rel = "below" if strict else "at most"
            raise t.error(hi, f"expected {lo} {rel} {hi}, got {lo} = {lim[lo]:g} and "
                          f"{hi} = {lim[hi]:g}")
