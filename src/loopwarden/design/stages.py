"""The controller stage catalog: one ``[[controller]]`` table → one :class:`Stage`.

Each stage type names its keys and builds its zero-pole-gain model directly from its
parameters (roots and gain in closed form), so the model is exactly the formula below.
Frequencies are rad/s after reading (``freq``, ``zero``, ``pole`` are converted from Hz
when the design says ``frequency_unit = "hz"``); ``ti``, ``td`` are seconds.

========== ======================================= ==============================================
type       keys                                    transfer function
========== ======================================= ==============================================
gain       k (≠ 0)                                 k
lead       zero < pole, normalize = "dc" | "hf"    dc: (p/z)(s+z)/(s+p), hf: (s+z)/(s+p)
lag        pole < zero, normalize = "hf" | "dc"    hf: (s+z)/(s+p), dc: (p/z)(s+z)/(s+p)
pi         kp (≠ 0), ti > 0                        kp (1 + 1/(ti s))
pid        form = "ideal" (default):               kp (1 + 1/(ti s) + td s/(tf s + 1)), tf = td/n
           kp ≠ 0, ti > 0, td ≥ 0
           form = "parallel": kp ≠ 0, ki, kd       kp + ki/s + kd s/(tf s + 1), tf = (kd/kp)/n
           form = "series": kp ≠ 0, ti, td         kp (1 + 1/(ti s))(1 + td s)/(tf s + 1),
                                                   tf = td/n, tf ≤ ti and tf ≤ td
           all: n > 0 (10) | tf > 0, b, c in
           0..10 (1), derivative_on = "error" |
           "measurement", time_unit = "s" | "min"
integrator k (≠ 0)                                 k/s
notch      freq, depth_db > 0, zeta > 0 (0.5)      (s²+2ζ_z ω s+ω²)/(s²+2ζ ω s+ω²)
lowpass    freq, order = 1 | 2, zeta (0.7071)      ω/(s+ω) or ω²/(s²+2ζ ω s+ω²)
tf         num, den  (or tf = {num, den})          as given (descending powers of s)
zpk        zeros, poles, gain  (or zpk = {...})    as given (roots converted from Hz)
========== ======================================= ==============================================

Every stage may also carry ``name`` (one line of text, :func:`read_stage_name`).

PID stages: every form is converted exactly to the ideal form, and ``Stage.params`` holds
the ideal ``kp``, ``ti``, ``td``, ``n`` (seconds), the setpoint weights ``b``, ``c``, the
``form`` as written and, for a non-default form, unit or filter key, ``as_written``.
Parallel: ti = kp/ki, td = kd/kp (ki ≠ 0 with the sign of kp: no PD stage; kd 0 or the
sign of kp).  Series (interacting, Åström & Hägglund 2006, ch. 3) with the filter on the
whole output: ti = ti' + td' − tf, kp = kp'·ti/ti', td = ti'·td'/ti − tf, n = td/tf.
``time_unit = "min"``: ti, td, tf are minutes, ki per minute, kd minutes.  ``b``, ``c``
(``derivative_on = "measurement"`` ≡ c = 0) weight the reference:
u = kp (b + 1/(ti s) + c·td s/(tf s + 1))·r − C·ym; ``Stage.reference_model`` is that
reference path (same poles) and ``Stage.reference_gap`` = C − C_r, None without weights.

For the notch ζ_z = ζ·10^(−depth_db/20), so |N(jω)| = 10^(−depth_db/20) at ω.
``Stage.params`` holds the numbers as floats (frequencies in rad/s, defaults filled in);
for tf and zpk stages it holds the coefficient and root lists as text in the file's
notation (roots in rad/s) and the zpk gain as a number.  Every stage must be proper; the
lead, lag, notch and lowpass have unity gain at DC or at high frequency as stated, so the
loop gain is set by ``gain`` / ``pi`` / ``pid`` stages.
"""

from __future__ import annotations

import math
import sys
import unicodedata
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

from ..lti import Zpk
from .bounds import MAX_ROOT_RAD_S, MIN_ROOT_RAD_S, check_gain, check_roots
from .forms import Table, read_direct_form, read_form, read_roots
from .model import Stage

Params = dict[str, float | str]
Builder = Callable[[Table, str], tuple[Params, Zpk]]


@dataclass(frozen=True, slots=True)
class StageType:
    """One entry of the catalog: its keys (besides ``type``) and how to build it."""

    keys: tuple[str, ...]
    required: tuple[str, ...]
    build: Builder
    formula: str


def _zpk(zeros: list[complex], poles: list[complex], gain: float, label: str) -> Zpk:
    return Zpk(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), gain, label)


def _second_order_roots(zeta: float, w: float) -> list[complex]:
    """Roots of s² + 2ζωs + ω² (ζ > 0, ω > 0), in closed form."""
    if zeta < 1.0:
        im = w * math.sqrt(1.0 - zeta * zeta)
        return [complex(-zeta * w, im), complex(-zeta * w, -im)]
    # Overdamped: the product form avoids cancellation in the smaller root.
    big = -w * (zeta + math.sqrt(zeta * zeta - 1.0))
    return [complex(big), complex(w * w / big)]


# ---------------------------------------------------------------------- builders
def _gain(t: Table, label: str) -> tuple[Params, Zpk]:
    k = t.number("k", nonzero=True)
    return {"k": k}, Zpk.constant(k, label)


def _zero_pole(t: Table, kind: str) -> tuple[float, float]:
    """Zero and pole of a lead or lag, with its sign rule checked."""
    z = t.frequency("zero")
    if kind == "lag" and t.number("pole", unit=t.unit) == 0:
        raise t.error("pole", "a lag's pole must be above 0",
                      "use type = 'pi' or 'integrator' for a pole at the origin")
    p = t.frequency("pole")
    if kind == "lead" and not z < p:
        raise t.error("pole", f"a lead needs zero < pole, got zero {_show(t, z)} and pole "
                      f"{_show(t, p)}", "with the pole below the zero this is a lag: "
                      "use type = 'lag'")
    if kind == "lag" and not p < z:
        raise t.error("pole", f"a lag needs pole < zero, got pole {_show(t, p)} above zero "
                      f"{_show(t, z)}", "with the pole above the zero this is a lead: "
                      "use type = 'lead'")
    return z, p


def _show(t: Table, w_rad_s: float) -> str:
    """A frequency as the user wrote it (in the file's unit)."""
    return f"{w_rad_s / (2 * math.pi):g} Hz" if t.hz else f"{w_rad_s:g} rad/s"


def _lead_lag(kind: str, default_norm: str) -> Builder:
    def build(t: Table, label: str) -> tuple[Params, Zpk]:
        z, p = _zero_pole(t, kind)
        norm = t.choice("normalize", ("dc", "hf"), default=default_norm)
        gain = p / z if norm == "dc" else 1.0
        return ({"zero": z, "pole": p, "normalize": norm},
                _zpk([-z], [-p], gain, label))
    return build


def _time(t: Table, key: str) -> float:
    """A positive time constant within 1/MAX_ROOT .. 1/MIN_ROOT seconds (1e-8 .. 1e8 s):
    its reciprocal is a root of the stage."""
    value = t.number(key, above=0.0, unit="s")
    if not 1.0 / MAX_ROOT_RAD_S <= value <= 1.0 / MIN_ROOT_RAD_S:
        raise t.error(key, f"expected a time within {1.0 / MAX_ROOT_RAD_S:g} .. "
                      f"{1.0 / MIN_ROOT_RAD_S:g} s, got {value:g} s",
                      "README.md lists the ranges the analysis can carry")
    return value


def _pi(t: Table, label: str) -> tuple[Params, Zpk]:
    kp = t.number("kp", nonzero=True)
    ti = _time(t, "ti")
    # kp (1 + 1/(ti s)) = kp (s + 1/ti) / s
    return {"kp": kp, "ti": ti}, _zpk([-1.0 / ti], [0.0], kp, label)


#: PID forms (``form``), the units of its times (``time_unit``, in seconds) and its keys.
PID_FORMS = ("ideal", "parallel", "series")
TIME_UNITS: Mapping[str, float] = MappingProxyType({"s": 1.0, "min": 60.0})
_PID_FORM_KEYS: Mapping[str, tuple[str, ...]] = MappingProxyType({
    "ideal": ("kp", "ti", "td"), "parallel": ("kp", "ki", "kd"), "series": ("kp", "ti", "td")})
_PID_COMMON = ("form", "n", "tf", "b", "c", "derivative_on", "time_unit")
#: Setpoint weights b and c lie within 0 .. MAX_SETPOINT_WEIGHT.
MAX_SETPOINT_WEIGHT = 10.0
DEFAULT_N = 10.0


def _pid_time(t: Table, key: str, scale: float, unit: str, value: float | None = None,
              shown: str | None = None) -> float:
    """A PID time in seconds (``scale`` seconds per ``unit``), within the root range."""
    if value is None:
        value = t.number(key, above=0.0, unit=unit) * scale
    if not 1.0 / MAX_ROOT_RAD_S <= value <= 1.0 / MIN_ROOT_RAD_S:
        raise t.error(key, f"{shown or 'expected a time'} within {1.0 / MAX_ROOT_RAD_S:g} .. "
                      f"{1.0 / MIN_ROOT_RAD_S:g} s, got {value:g} s",
                      "README.md lists the ranges the analysis can carry")
    return value


def _pid_filter(t: Table, td_s: float, scale: float, unit: str) -> float | None:
    """The derivative filter time constant in seconds from ``n`` (tf = td/n, td the form's
    own derivative time in seconds) or ``tf``; None when there is no derivative term."""
    if t.has("n") and t.has("tf"):
        raise t.error("tf", "both n and tf given for the derivative filter",
                      "give the filter either as n (tf = td/n) or as the time constant tf")
    if t.has("tf"):
        tf = _pid_time(t, "tf", scale, unit)
        return tf if td_s > 0.0 else None
    n = t.number("n", above=0.0, default=DEFAULT_N)
    return td_s / n if td_s > 0.0 else None


def _pid_parallel(t: Table, scale: float, unit: str) -> tuple[float, float, float, float | None]:
    """kp + ki/s + kd s/(tf s + 1) → ideal kp, ti, td (s) and the filter tf (s)."""
    kp = t.number("kp", nonzero=True)
    ki = t.number("ki", unit=f"1/{unit}")
    if ki == 0.0:
        raise t.error("ki", "a pid stage needs integral action, got ki = 0",
                      "for a PD controller use a gain stage and a lead stage")
    if (ki > 0) != (kp > 0):
        raise t.error("ki", f"ki must have the sign of kp (ti = kp/ki > 0), got kp = {kp:g}, "
                      f"ki = {ki:g}", "a negative ti makes the integral act against the "
                      "proportional term")
    kd = t.number("kd", unit=unit)
    if kd != 0.0 and (kd > 0) != (kp > 0):
        raise t.error("kd", f"kd must be 0 or have the sign of kp (td = kd/kp ≥ 0), got "
                      f"kp = {kp:g}, kd = {kd:g}")
    ti = _pid_time(t, "ki", 1.0, unit, kp / (ki / scale), "ti = kp/ki must be")
    td = 0.0 if kd == 0.0 else _pid_time(t, "kd", 1.0, unit, kd * scale / kp,
                                         "td = kd/kp must be")
    return kp, ti, td, _pid_filter(t, td, scale, unit)


def _pid_series(t: Table, scale: float, unit: str) -> tuple[float, float, float, float | None]:
    """k'(1 + 1/(ti' s))(1 + td' s)/(tf s + 1) → ideal kp, ti, td (s) and tf (s).

    With the filter on the whole output the conversion is exact for any tf: equating the
    numerators over ti s (tf s + 1) gives ti = ti' + td' − tf, kp = k'·ti/ti',
    td = ti'·td'/ti − tf (with tf = 0 the published k' (1 + td'/ti'), ti' + td',
    ti'·td'/(ti' + td')).  It needs tf ≤ ti' and tf ≤ td' (then ti > 0 and td ≥ 0).
    """
    k = t.number("kp", nonzero=True)
    ti_s = _pid_time(t, "ti", scale, unit)
    td_s = t.number("td", minimum=0.0, unit=unit) * scale
    if td_s != 0.0:
        td_s = _pid_time(t, "td", scale, unit)
    if td_s == 0.0 and t.has("tf"):
        raise t.error("tf", "a series pid with td = 0 has no derivative to filter",
                      "remove tf, or add a lowpass stage for a filter on the output")
    tf = _pid_filter(t, td_s, scale, unit)
    if tf is None:
        return k, ti_s, 0.0, None
    key = "tf" if t.has("tf") else "n"
    if tf > ti_s or tf > td_s:
        raise t.error(key, f"the series filter time constant {tf / scale:g} {unit} exceeds "
                      f"ti' = {ti_s / scale:g} {unit} or td' = {td_s / scale:g} {unit}",
                      "the filter must be faster than both (n ≥ 1 and tf ≤ ti); the ideal "
                      "form then has ti > 0 and td ≥ 0")
    ti = ti_s + td_s - tf
    kp = k * ti / ti_s
    td = ti_s * td_s / ti - tf
    # (ti' − tf)(td' − tf) = 0 gives td = 0 exactly; rounding must not leave a 1e-17 td.
    if td <= 8.0 * sys.float_info.epsilon * tf:
        return kp, ti, 0.0, None
    return kp, ti, td, tf


def _pid_weights(t: Table) -> tuple[float, float]:
    """Setpoint weights b (proportional) and c (derivative)."""
    b = t.number("b", minimum=0.0, maximum=MAX_SETPOINT_WEIGHT, default=1.0)
    on = t.choice("derivative_on", ("error", "measurement"), default="error")
    if on == "measurement":
        c = t.number("c", minimum=0.0, maximum=MAX_SETPOINT_WEIGHT, default=0.0)
        if c != 0.0:
            raise t.error("c", f"derivative_on = \"measurement\" means c = 0, got c = {c:g}",
                          "remove c, or set derivative_on = \"error\" with the weight c")
    else:
        c = t.number("c", minimum=0.0, maximum=MAX_SETPOINT_WEIGHT, default=1.0)
    return b, c


def _pid_zpk(kp: float, ti: float, td: float, tf: float, label: str, b: float = 1.0,
             c: float = 1.0) -> Zpk:
    """kp (b + 1/(ti s) + c·td s/(tf s + 1)) in zpk form (b = c = 1: the feedback path).

    Over the common denominator ti·s·(tf·s + 1) the numerator is
    ti(b·tf + c·td) s² + (b·ti + tf) s + 1; the leading ratio gives the gain
    kp(b·tf + c·td)/tf.
    """
    a2, a1, a0 = ti * (b * tf + c * td), b * ti + tf, 1.0
    if a2 == 0.0:          # b = c = 0: kp (tf s + 1)/(ti s (tf s + 1)), the pair kept
        return _zpk([-1.0 / a1], [0.0, -1.0 / tf], kp * a1 / (ti * tf), label)
    disc = a1 * a1 - 4.0 * a2 * a0
    if disc >= 0:
        big = -(a1 + math.sqrt(disc)) / (2.0 * a2)
        zeros = [complex(big), complex(a0 / (a2 * big))]
    else:
        im = math.sqrt(-disc) / (2.0 * a2)
        zeros = [complex(-a1 / (2.0 * a2), im), complex(-a1 / (2.0 * a2), -im)]
    return _zpk(zeros, [0.0, -1.0 / tf], kp * (b * tf + c * td) / tf, label)


def _pi_zpk(kp: float, ti: float, label: str, b: float = 1.0) -> Zpk:
    """kp (b + 1/(ti s)) = kp·b (s + 1/(b ti))/s, or kp/(ti s) when b = 0."""
    if b == 0.0:
        return _zpk([], [0.0], kp / ti, label)
    return _zpk([-1.0 / (b * ti)], [0.0], kp * b, label)


def _pid(t: Table, label: str) -> tuple[Params, Zpk]:
    form = t.choice("form", PID_FORMS, default="ideal")
    own = _PID_FORM_KEYS[form]
    for key in t.data:
        if key not in own and key not in _PID_COMMON:
            other = next(f for f, keys in _PID_FORM_KEYS.items() if key in keys)
            raise t.error(key, f"'{key}' belongs to form = \"{other}\", this pid has form = "
                          f"\"{form}\"", f"the {form} form takes {', '.join(own)}")
    for key in own:
        if not t.has(key):
            raise t.error(key, f"missing required key '{key}'")
    unit = t.choice("time_unit", tuple(TIME_UNITS), default="s")
    scale = TIME_UNITS[unit]
    if form == "parallel":
        kp, ti, td, tf = _pid_parallel(t, scale, unit)
    elif form == "series":
        kp, ti, td, tf = _pid_series(t, scale, unit)
    else:
        kp = t.number("kp", nonzero=True)
        ti = _pid_time(t, "ti", scale, unit)
        td = t.number("td", minimum=0.0, unit=unit) * scale
        if td != 0.0:
            td = _pid_time(t, "td", scale, unit)
        tf = _pid_filter(t, td, scale, unit)
    b, c = _pid_weights(t)
    n = td / tf if td > 0.0 and tf is not None else t.number("n", above=0.0, default=DEFAULT_N)
    params: Params = {"kp": kp, "ti": ti, "td": td, "n": n, "b": b, "c": c, "form": form}
    if form != "ideal" or unit != "s" or t.has("tf"):
        params["as_written"] = ", ".join(
            f"{k} = {t.data[k]:g}" if isinstance(t.data[k], int | float) else
            f"{k} = \"{t.data[k]}\"" for k in t.data)
    if td == 0.0 or tf is None:
        return params, _pi_zpk(kp, ti, label)
    return params, _pid_zpk(kp, ti, td, tf, label)


def pid_reference_gap(stage: Stage) -> Zpk | None:
    """``C − C_r = kp ((1 − b) + (1 − c)·td s/(tf s + 1))`` of a 2-DOF pid stage, built
    from its parameters (exact zeros at the origin: b = 1 gives one), None as for
    :func:`pid_reference_model`.  The steady-state errors of r → y depend on it."""
    if pid_reference_model(stage) is None:
        return None
    p = stage.params
    kp, td, n, b, c = (float(p[k]) for k in ("kp", "td", "n", "b", "c"))
    label = f"{stage.model.label} reference gap"
    if td == 0.0:
        return Zpk.constant(kp * (1.0 - b), label)
    tf = td / n
    lead = (1.0 - b) * tf + (1.0 - c) * td      # kp (lead·s + (1 − b))/(tf s + 1)
    if b == 1.0:
        return _zpk([0.0], [-1.0 / tf], kp * lead / tf, label)
    if lead == 0.0:
        return _zpk([], [-1.0 / tf], kp * (1.0 - b) / tf, label)
    return _zpk([-(1.0 - b) / lead], [-1.0 / tf], kp * lead / tf, label)


def pid_reference_model(stage: Stage) -> Zpk | None:
    """The reference path kp (b + 1/(ti s) + c·td s/((td/n) s + 1)) of a 2-DOF pid stage
    (None when b = c = 1, or for any other stage: the reference then sees the feedback
    controller).  Its poles are those of the stage's feedback path."""
    p = stage.params
    if stage.type != "pid" or (p["b"], p["c"]) == (1.0, 1.0):
        return None
    kp, ti, td, n = (float(p[k]) for k in ("kp", "ti", "td", "n"))
    label = f"{stage.model.label} reference path"
    if td == 0.0:
        return _pi_zpk(kp, ti, label, float(p["b"]))
    return _pid_zpk(kp, ti, td, td / n, label, float(p["b"]), float(p["c"]))


def _integrator(t: Table, label: str) -> tuple[Params, Zpk]:
    k = t.number("k", nonzero=True)
    return {"k": k}, _zpk([], [0.0], k, label)


def _notch(t: Table, label: str) -> tuple[Params, Zpk]:
    w = t.frequency("freq")
    depth = t.number("depth_db", above=0.0, maximum=200.0, unit="dB")
    zeta = t.number("zeta", above=0.0, default=0.5)
    zeta_z = zeta * 10.0 ** (-depth / 20.0)
    return ({"freq": w, "depth_db": depth, "zeta": zeta},
            _zpk(_second_order_roots(zeta_z, w), _second_order_roots(zeta, w), 1.0, label))


def _lowpass(t: Table, label: str) -> tuple[Params, Zpk]:
    w = t.frequency("freq")
    order = t.integer("order", choices=(1, 2), default=1)
    if order == 1:
        if t.has("zeta"):
            raise t.error("zeta", "zeta applies only to a second-order lowpass",
                          "set order = 2 or remove zeta")
        return {"freq": w, "order": 1.0}, _zpk([], [-w], w, label)
    zeta = t.number("zeta", above=0.0, default=0.7071)
    return ({"freq": w, "order": 2.0, "zeta": zeta},
            _zpk([], _second_order_roots(zeta, w), w * w, label))


def _roots_text(roots: list[complex]) -> str:
    """Roots in the file's notation (a pair once as [re, im]), rad/s."""
    parts = [f"{r.real:g}" if r.imag == 0 else f"[{r.real:g}, {r.imag:g}]"
             for r in roots if r.imag >= 0]
    return "[" + ", ".join(parts) + "]"


def _form_stage(t: Table, form: str, label: str) -> Zpk:
    """A tf / zpk stage, written either with its keys directly in the stage table or, as for
    the plant, as ``tf = { num = ..., den = ... }`` / ``zpk = { ... }``."""
    if not t.has(form):
        return read_direct_form(t, form, label)
    others = [k for k in t.data if k != form]
    if others:
        raise t.error(others[0], f"'{others[0]}' given beside '{form} = {{...}}'",
                      f"write the {form} either inline as {form} = {{...}} or as keys of "
                      "the stage, not both")
    model, _ = read_form(t, label)
    return model


def _tf_stage(t: Table, label: str) -> tuple[Params, Zpk]:
    model = _form_stage(t, "tf", label)
    body = t.data.get("tf", t.data)
    return ({"num": str([float(v) for v in body["num"]]),
             "den": str([float(v) for v in body["den"]])}, model)


def _zpk_stage(t: Table, label: str) -> tuple[Params, Zpk]:
    model = _form_stage(t, "zpk", label)
    body = t.table("zpk") if t.has("zpk") else t
    zeros = read_roots(body, "zeros") if body.has("zeros") else []
    return ({"zeros": _roots_text(zeros), "poles": _roots_text(read_roots(body, "poles")),
             "gain": model.gain}, model)


#: The catalog, in the order the documentation lists it.
STAGE_TYPES: Mapping[str, StageType] = MappingProxyType({
    "gain": StageType(("k",), ("k",), _gain, "k"),
    "lead": StageType(("zero", "pole", "normalize"), ("zero", "pole"), _lead_lag("lead", "dc"),
                      "dc: (p/z)(s+z)/(s+p); hf: (s+z)/(s+p)"),
    "lag": StageType(("zero", "pole", "normalize"), ("zero", "pole"), _lead_lag("lag", "hf"),
                     "hf: (s+z)/(s+p); dc: (p/z)(s+z)/(s+p)"),
    "pi": StageType(("kp", "ti"), ("kp", "ti"), _pi, "kp (1 + 1/(ti s))"),
    "pid": StageType(("kp", "ti", "td", "ki", "kd", *_PID_COMMON), (), _pid,
                     "kp (1 + 1/(ti s) + td s/((td/n) s + 1))"),
    "integrator": StageType(("k",), ("k",), _integrator, "k/s"),
    "notch": StageType(("freq", "depth_db", "zeta"), ("freq", "depth_db"), _notch,
                       "(s²+2ζ_z ω s+ω²)/(s²+2ζ ω s+ω²)"),
    "lowpass": StageType(("freq", "order", "zeta"), ("freq",), _lowpass,
                         "ω/(s+ω) or ω²/(s²+2ζ ω s+ω²)"),
    "tf": StageType(("num", "den", "tf"), (), _tf_stage, "num(s)/den(s)"),
    "zpk": StageType(("zeros", "poles", "gain", "zpk"), (), _zpk_stage,
                     "gain·Π(s−z)/Π(s−p)"),
})

_FORM_KEY_HINT = {
    "tf": "a transfer function stage is type = 'tf' with num and den",
    "zpk": "a zero-pole-gain stage is type = 'zpk' with zeros, poles and gain",
    "ss": "controller stages take tf or zpk forms only; convert the state space to zpk",
}


def read_stage(t: Table, index: int) -> Stage:
    """Validate one ``[[controller]]`` table (``index`` is 1-based) into a :class:`Stage`."""
    if "type" not in t.data:
        raise t.error("type", "missing required key 'type'",
                      "stage types: " + ", ".join(STAGE_TYPES))
    kind = t.choice("type", tuple(STAGE_TYPES))
    spec = STAGE_TYPES[kind]
    body = Table({k: v for k, v in t.data.items() if k != "type"}, t.where, t.file, t.hz)
    body.check_keys(spec.keys, spec.required, hints=_FORM_KEY_HINT)
    label = f"{t.where} {kind}"
    params, model = spec.build(body, label)
    what = "the stage's {}" + (f" (from {', '.join(k for k in spec.keys if k in body.data)})"
                               if kind not in ("tf", "zpk") else "")
    scale = 1.0 / (2 * math.pi) if t.hz and kind not in ("tf",) else 1.0
    check_roots(model.poles, file=t.file, where=t.where, what=what.format("pole"),
                unit_scale=scale, unit=t.unit if scale != 1.0 else "rad/s")
    check_roots(model.zeros, file=t.file, where=t.where, what=what.format("zero"),
                unit_scale=scale, unit=t.unit if scale != 1.0 else "rad/s")
    check_gain(model.gain, file=t.file, where=t.where)
    stage = Stage(index=index, type=kind, params=MappingProxyType(params), model=model)
    reference = pid_reference_model(stage)
    if reference is not None:
        where = t.at(next((k for k in ("b", "c", "derivative_on") if t.has(k)), "b"))
        check_gain(reference.gain, file=t.file, where=where)
        check_roots(reference.zeros, file=t.file, where=where,
                    what="the reference path's zero (from b, c)")
    return Stage(index=index, type=kind, params=MappingProxyType(params), model=model,
                 reference_model=reference, reference_gap=pid_reference_gap(stage))


#: The longest stage name (characters).
MAX_STAGE_NAME = 80


def read_stage_name(t: Table) -> str | None:
    """A stage's optional ``name``: one line of at most :data:`MAX_STAGE_NAME` characters,
    no control characters (it appears in findings, snippets and reports)."""
    if not t.has("name"):
        return None
    name = t.string("name")
    if len(name) > MAX_STAGE_NAME:
        raise t.error("name", f"a stage name of {len(name)} characters; at most "
                      f"{MAX_STAGE_NAME}", "shorten the name")
    if any(unicodedata.category(ch) in ("Cc", "Cf", "Zl", "Zp") for ch in name):
        raise t.error("name", "a stage name may not hold control characters or line breaks",
                      "write the name on one line")
    return name
