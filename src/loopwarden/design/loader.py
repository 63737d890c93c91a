"""Design files: TOML text → a validated, frozen :class:`~loopwarden.design.model.Design`.

The format is described in DESIGN.md §3; this module is its strict reader.  Unknown tables
and keys, wrong types, non-finite numbers (``inf``/``nan`` are valid TOML), wrong signs and
improper blocks are errors naming the file, the place (``controller[2].pole``), what was
expected and a hint.  Every error is a :class:`~loopwarden.errors.DesignError` (exit 2).

Units
-----
``[design] frequency_unit`` is ``"rad/s"`` (default) or ``"hz"`` (either case).  With ``"hz"`` every
frequency in the file is multiplied by 2π on reading, so the model holds rad/s only:

* lead and lag ``zero`` and ``pole``; notch and lowpass ``freq``;
* the roots of every ``zpk`` form (plant, plant variants, sensor and zpk stages) — the zpk
  ``gain`` still multiplies the monic factors ``(s − z)`` of the converted roots;
* the frequency requirements ``reference_band``, ``crossover_min`` and ``crossover_max``;
* the ``[disturbance]`` ``band``.

``tf`` and ``ss`` coefficients are always in the Laplace variable s in rad/s and are never
converted.  Times (``ti``, ``td``, ``delay``, ``settling_time``, ``rise_time``,
``delay_margin``) are seconds.  ``[limits]`` values are taken as the rule set states its
checks (rad/s for frequencies) and are not converted.

Roots: a real root is a number; a complex pair is written once as ``[re, im]`` with
``im > 0`` and means ``re ± j·im``.  Polynomials are in descending powers of s.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import math
import re
import tomllib
from pathlib import Path
from types import MappingProxyType

from ..errors import DesignError, did_you_mean
from ..input_files import read_input, toml_loads
from ..lti import Zpk
from .bounds import MAX_STAGES, MAX_VARIANTS, Block, check_loop
from .forms import FORMS, Table, read_form
from .frd import read_frd
from .model import (
    Design,
    PlantVariant,
    Requirements,
    Sampling,
    Stage,
    Waiver,
)
from .parameters import (
    ParameterSpace,
    check_used,
    read_parameters,
    read_sweep,
    substitute_tables,
)
from .sampling import read_controller_stage, read_sampling
from .tables import read_actuator, read_disturbance, read_limits, read_requirements

__all__ = ["design_at", "load_design", "parse_design"]

_TOP = ("design", "plant", "controller", "sensor", "requirements", "limits", "waivers",
        "sampling", "disturbance", "actuator", "parameters", "sweep")
_FRD_HINT = ("a measured frequency response (frd) is accepted for the plant and its "
             "variants only; give the sensor as a tf, zpk or ss model")
#: Keys that describe what a measured response cannot show: declared poles.
_FRD_ONLY = ("unstable_poles", "integrators")
_PLANT_FORMS = (*FORMS, "frd")



def load_design(path: str | Path) -> Design:
    """Read and validate a design file.

    Parameters
    ----------
    path : str or Path
        The TOML design file.

    Returns
    -------
    Design
        The validated model; ``sha256`` is the hash of the file's raw bytes and ``text`` the
        file exactly as read.  All frequencies in it are rad/s (see the module docstring for
        the ``frequency_unit = "hz"`` conversion).

    Raises
    ------
    DesignError
        When the file is missing, unreadable, not UTF-8, not valid TOML or not a valid
        design; the error names the file and the offending table and key.
    """
    name = str(path)
    raw = read_input(path, DesignError, "design file", shown=name,
                     hint_missing="check the path of the design file")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise DesignError(f"not UTF-8 text (byte {exc.start + 1})", file=name,
                          hint="save the design file as UTF-8") from None
    return _parse(text, name, hashlib.sha256(raw).hexdigest())


def parse_design(text: str, path: str) -> Design:
    """Validate design-file ``text``; ``path`` is used in messages and kept as ``Design.path``.

    ``sha256`` is the hash of ``text`` encoded as UTF-8 (the raw bytes of a UTF-8 file).
    """
    return _parse(text, path, hashlib.sha256(text.encode("utf-8")).hexdigest())


# ---------------------------------------------------------------------- top level
def _parse(text: str, path: str, sha256: str) -> Design:
    try:
        data = toml_loads(text, DesignError, path)
    except tomllib.TOMLDecodeError as exc:
        raise _syntax_error(exc, path) from None
    top = Table(data, "", path)
    top.check_keys(_TOP)
    for key in ("design", "plant", "controller"):
        if key not in data:
            raise DesignError(f"missing the [{key}] table" if key != "controller" else
                              "missing the controller: no [[controller]] stage",
                              file=path, where=key, hint=_MISSING_HINT[key])

    head = _table(top, "design")
    head.check_keys(("name", "revision", "description", "frequency_unit"), required=("name",))
    written = head.string("frequency_unit", default="rad/s")
    unit = written.lower()
    if unit not in ("rad/s", "hz"):
        raise head.error("frequency_unit", f"unknown frequency unit {written!r}",
                         'allowed values: "rad/s", "hz"')
    hz = unit == "hz"
    space = None
    if "parameters" in data:
        space, data = _parameter_space(Table(data, "", path, hz), data)
    elif "sweep" in data:
        raise top.error("sweep", "a [sweep] table needs uncertain parameters",
                        "add a [parameters] table and name its entries in the plant")
    top = Table(data, "", path, hz)

    sampling = read_sampling(_table(top, "sampling")) if "sampling" in data else None
    variants = _plant(_table(top, "plant"))
    if sampling is not None:
        measured = next((v for v in variants if v.measured is not None), None)
        if measured is not None:
            raise DesignError("a measured (frd) plant cannot be sampled exactly: the sampled "
                              "response aliases frequencies beyond the sweep",
                              file=path, where=measured.where,
                              hint="review the measured plant with the continuous "
                                   "controller, or give a model of the plant")
    controller = _controller(top, sampled=sampling is not None)
    sensor, sensor_delay = _sensor(top) if "sensor" in data else (None, 0.0)
    requirements = read_requirements(_table(top, "requirements")) if "requirements" in data \
        else Requirements()
    limits = read_limits(_table(top, "limits")) if "limits" in data else MappingProxyType({})
    waivers = _waivers(top, tuple(v.name for v in variants)) if "waivers" in data else ()
    disturbance = read_disturbance(_table(top, "disturbance")) if "disturbance" in data else None
    actuator = (read_actuator(_table(top, "actuator"), controller)
                if "actuator" in data else None)

    _check_sizes(top, variants, controller)
    for variant in variants:
        _check_loop(path, variant, controller, sensor, sensor_delay, sampling, hz)
    sweep = read_sweep(_table(top, "sweep")) if "sweep" in data else None
    if space is not None:
        _check_ranges(path, space, controller, sampling, hz)

    return Design(
        name=head.string("name"),
        path=path,
        sha256=sha256,
        text=text,
        revision=_optional_text(head, "revision"),
        description=_optional_text(head, "description"),
        frequency_unit=unit,
        variants=variants,
        controller=controller,
        sensor=sensor,
        sensor_delay_s=sensor_delay,
        requirements=requirements,
        rule_limits=limits,
        waivers=waivers,
        sampling=sampling,
        disturbance=disturbance,
        actuator=actuator,
        parameters=space,
        sweep=sweep,
    )


# ---------------------------------------------------------------------- parameters
def _parameter_space(top: Table, data: dict) -> tuple[ParameterSpace, dict]:
    """Read ``[parameters]`` and return the data with the nominal values for the names."""
    params = read_parameters(_table(top, "parameters"))
    plant = data.get("plant")
    sensor = data.get("sensor")
    if not isinstance(plant, dict):
        raise top.error("plant", "expected a table [plant]")
    uses: dict[str, list[str]] = {}
    nominal = {p.name: p.nominal for p in params}
    plant_n, sensor_n = substitute_tables(plant, sensor if isinstance(sensor, dict) else None,
                                          nominal, file=top.file, uses=uses)
    check_used(params, uses, top.file)
    out = dict(data)
    out["plant"] = plant_n
    if sensor_n is not None:
        out["sensor"] = sensor_n
    space = ParameterSpace(parameters=params, plant=plant,
                           sensor=sensor if isinstance(sensor, dict) else None,
                           uses=MappingProxyType({k: tuple(v) for k, v in uses.items()}))
    return space, out


def _blocks_at(space: ParameterSpace, values: dict[str, float], path: str,
               hz: bool) -> tuple[tuple[PlantVariant, ...], Zpk | None, float]:
    plant, sensor = substitute_tables(space.plant, space.sensor, values, file=path)
    data: dict = {"plant": plant}
    if sensor is not None:
        data["sensor"] = sensor
    top = Table(data, "", path, hz)
    variants = _plant(_table(top, "plant"))
    sensor_model, sensor_delay = _sensor(top) if sensor is not None else (None, 0.0)
    return variants, sensor_model, sensor_delay


#: Places where a parameter's range must not contain 0: the block would change form.
_NO_ZERO = ((".zpk.gain", "the gain would vanish"),
            (".tf.den[1]", "the leading denominator coefficient would vanish, making the "
                           "block improper"))


def _check_ranges(path: str, space: ParameterSpace, controller: tuple[Stage, ...],
                  sampling: Sampling | None, hz: bool) -> None:
    """Each parameter at its min and at its max (the others nominal) gives valid blocks.

    A zpk gain or a leading tf denominator coefficient whose range holds 0 is refused: the
    block would lose its gain or its degree inside the range.
    """
    for p in space.parameters:
        for place in space.uses.get(p.name, ()):
            for tail, why in _NO_ZERO:
                if place.endswith(tail) and p.min <= 0.0 <= p.max:
                    raise DesignError(f"the range {p.min:g} .. {p.max:g} contains 0, where "
                                      f"{place} uses it: {why}", file=path,
                                      where=f"parameters.{p.name}",
                                      hint="keep the range on one side of 0")
        for key, end in (("min", p.min), ("max", p.max)):
            values = space.nominal | {p.name: end}
            try:
                variants, sensor, sensor_delay = _blocks_at(space, values, path, hz)
                for variant in variants:
                    _check_loop(path, variant, controller, sensor, sensor_delay, sampling, hz)
            except DesignError as exc:
                place = f"{exc.where}: " if exc.where else ""
                raise DesignError(f"with {p.name} = {end:g}: {place}{exc.what}", file=path,
                                  where=f"parameters.{p.name}.{key}", hint=exc.hint) from None


def design_at(design: Design, values: dict[str, float]) -> Design:
    """``design`` with its plant variants and sensor at the parameter ``values``.

    ``values`` holds every parameter of ``design.parameters``; the result has the same
    controller, requirements and settings, and ``parameters`` kept.
    """
    space = design.parameters
    if space is None:
        return design
    variants, sensor, sensor_delay = _blocks_at(space, values, design.path,
                                                design.frequency_unit == "hz")
    return dataclasses.replace(design, variants=variants, sensor=sensor,
                               sensor_delay_s=sensor_delay)


def _check_sizes(top: Table, variants: tuple[PlantVariant, ...],
                 controller: tuple[Stage, ...]) -> None:
    if len(variants) - 1 > MAX_VARIANTS:
        raise top.error("plant.variants", f"{len(variants) - 1} plant variants; at most "
                        f"{MAX_VARIANTS} are reviewed in one design",
                        "split the variants over several design files")
    if len(controller) > MAX_STAGES:
        raise top.error("controller", f"{len(controller)} controller stages; at most "
                        f"{MAX_STAGES} are accepted", "combine stages into a tf or zpk stage")


def _check_loop(path: str, variant: PlantVariant, controller: tuple[Stage, ...],
                sensor: Zpk | None, sensor_delay: float, sampling: Sampling | None,
                hz: bool) -> None:
    """The loop-level ranges of :mod:`.bounds` for the loop around one plant variant."""
    blocks = [Block(f"controller[{st.index}]", st.model.zeros, st.model.poles,
                    st.model.gain, st.domain) for st in controller]
    if variant.measured is None:
        blocks.append(Block(f"{variant.where}.{variant.form}", variant.model.zeros,
                            variant.model.poles, variant.model.gain))
    if sensor is not None:
        blocks.append(Block("sensor", sensor.zeros, sensor.poles, sensor.gain))
    delay = variant.delay_s + sensor_delay
    delay_where = (f"{variant.where}.delay" if variant.delay_s >= sensor_delay
                   else "sensor.delay")
    check_loop(blocks, file=path, variant_where=variant.where, delay_s=delay,
               delay_where=delay_where,
               period_s=sampling.period_s if sampling is not None else None,
               compute_delay=sampling.compute_delay_samples if sampling is not None else 0,
               measured_max_rad_s=(variant.measured.frequency_max_rad_s
                                   if variant.measured is not None else None),
               unit_scale=1.0 / (2.0 * math.pi) if hz else 1.0,
               unit="Hz" if hz else "rad/s")


_MISSING_HINT = {
    "design": 'start the file with [design] and name = "..."',
    "plant": "add a [plant] table with one of tf, zpk or ss",
    "controller": 'add at least one [[controller]] table, e.g. type = "gain" and k = 1.0',
}


def _syntax_error(exc: tomllib.TOMLDecodeError, path: str) -> DesignError:
    msg = str(exc)
    m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
    if m:
        what = msg[:m.start()].strip()
        where = f"line {m.group(1)}, column {m.group(2)}"
    else:
        m_end = re.search(r"\(at end of document\)", msg)
        what = msg[:m_end.start()].strip() if m_end else msg
        where = "end of file" if m_end else None
    return DesignError(f"TOML syntax error: {what}", file=path, where=where,
                       hint="see https://toml.io for the syntax")


def _table(parent: Table, key: str) -> Table:
    value = parent.data[key]
    if not isinstance(value, dict):
        raise parent.error(key, f"expected a table [{parent.at(key)}], got "
                           f"{'an array of tables' if isinstance(value, list) else 'a value'}")
    return parent.sub(key, value)


def _optional_text(t: Table, key: str) -> str | None:
    if not t.has(key):
        return None
    value = t.data[key]
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        # revision = 3 is a common way to write a revision; keep it as written.
        return str(value)
    return t.string(key, nonempty=False)


def _array_of_tables(parent: Table, key: str) -> list[Table]:
    value = parent.data[key]
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise parent.error(key, f"expected an array of tables [[{parent.at(key)}]]",
                           f"write each entry as its own [[{parent.at(key)}]] table")
    return [Table(v, f"{parent.at(key)}[{i + 1}]", parent.file, parent.hz)
            for i, v in enumerate(value)]


# ---------------------------------------------------------------------- plant and sensor
def _delay(t: Table, default: float = 0.0) -> float:
    return t.number("delay", minimum=0.0, unit="s", default=default)


def _plant_model(t: Table, label: str, name: str) -> PlantVariant:
    """The plant of a [plant] or [[plant.variants]] table: a model or a measured response.

    A measured plant's ``delay`` defaults to 0 (the measurement already holds the real
    dead time); ``unstable_poles`` and ``integrators`` are accepted only beside ``frd``.
    """
    if not t.has("frd"):
        extra = next((k for k in _FRD_ONLY if t.has(k)), None)
        if extra is not None:
            raise t.error(extra, f"'{extra}' applies only to a measured plant (frd)",
                          "a model's poles are read from the model itself")
        model, form = read_form(t, label)
        return PlantVariant(name=name, model=model, form=form, where=t.where or "plant")
    other = next((f for f in FORMS if t.has(f)), None)
    if other is not None:
        raise t.error("frd", f"both '{other}' and 'frd' are given",
                      "give exactly one of tf, zpk, ss or frd")
    counts = {}
    for key in _FRD_ONLY:
        value = t.data.get(key, 0)
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            raise t.error(key, f"expected a whole number ≥ 0, got {value!r}")
        counts[key] = value
    measured = read_frd(t.table("frd"), t.file, unstable_poles=counts["unstable_poles"],
                        integrators=counts["integrators"])
    return PlantVariant(name=name, model=Zpk.constant(1.0, label=f"{label} (measured)"),
                        form="frd", where=t.where or "plant", measured=measured)


def _plant(t: Table) -> tuple[PlantVariant, ...]:
    t.check_keys((*_PLANT_FORMS, *_FRD_ONLY, "delay", "variants"))
    nominal = _plant_model(t, "plant", "nominal")
    delay = _delay(t)
    out = [dataclasses.replace(nominal, delay_s=delay)]
    if "variants" not in t.data:
        return tuple(out)
    seen: dict[str, str] = {}
    for vt in _array_of_tables(t, "variants"):
        vt.check_keys(("name", *_PLANT_FORMS, *_FRD_ONLY, "delay"), required=("name",))
        name = vt.string("name")
        if name.strip().lower() == "nominal":
            raise vt.error("name", "'nominal' is reserved for the [plant] itself",
                           "give the variant a descriptive name, e.g. \"heavy load\"")
        if name in seen:
            raise vt.error("name", f"duplicate variant name {name!r} (also {seen[name]})",
                           "variant names must be unique")
        seen[name] = vt.where
        variant = _plant_model(vt, f"plant ({name})", name)
        inherited = 0.0 if variant.measured is not None else delay
        out.append(dataclasses.replace(variant, delay_s=_delay(vt, inherited)))
    return tuple(out)


def _sensor(top: Table) -> tuple[Zpk, float]:
    t = _table(top, "sensor")
    t.check_keys((*FORMS, "delay"), hints={"frd": _FRD_HINT})
    model, _ = read_form(t, "sensor")
    if model.origin_poles != 0 or model.low_frequency_coefficient() == 0:
        what = ("infinite DC gain (a pole at s = 0)" if model.origin_poles > 0
                else "zero DC gain (a zero at s = 0)")
        raise t.error(None, f"the sensor has {what}",
                      "a sensor must pass the measured value at DC with a finite, nonzero gain")
    return model, _delay(t)


# ---------------------------------------------------------------------- controller
def _controller(top: Table, *, sampled: bool = False) -> tuple[Stage, ...]:
    tables = _array_of_tables(top, "controller")
    if not tables:
        raise top.error("controller", "the controller has no stages",
                        'add at least one [[controller]] table, e.g. type = "gain"')
    stages = tuple(read_controller_stage(st, i + 1, sampled=sampled)
                   for i, st in enumerate(tables))
    for st in stages:
        if st.reference_model is None:
            continue
        # u = C_2···C_k · (C_r,pid·r − C_pid·ym): the reference path is defined for a 2-DOF
        # pid that sees the reference and the measurement directly, i.e. the first stage.
        at = tables[st.index - 1]
        key = next(k for k in ("b", "c", "derivative_on") if at.has(k))
        if sampled:
            raise at.error(key, "setpoint weights (b, c ≠ 1) are not supported in a sampled "
                           "design", "leave b = c = 1, or review the loop in continuous time")
        if st.index != 1:
            raise at.error(key, f"a pid with setpoint weights (b, c ≠ 1) must be the first "
                           f"controller stage, it is stage {st.index}",
                           "stages before it would filter the error, not the reference and "
                           "the measurement separately; move the pid first")
    return stages


# ---------------------------------------------------------------------- waivers
def _waivers(top: Table, variant_names: tuple[str, ...]) -> tuple[Waiver, ...]:
    out = []
    for wt in _array_of_tables(top, "waivers"):
        wt.check_keys(("rule", "variant", "reason", "approved_by", "expires"),
                      required=("rule", "reason", "approved_by", "expires"))
        variant = wt.string("variant") if wt.has("variant") else None
        if variant is not None and variant not in variant_names:
            raise wt.error("variant", f"no plant variant named {variant!r}",
                           did_you_mean(variant, variant_names)
                           or "variants: " + ", ".join(repr(v) for v in variant_names))
        out.append(Waiver(rule=wt.string("rule"), reason=wt.string("reason"),
                          approved_by=wt.string("approved_by"),
                          expires=_date(wt, "expires"), variant=variant))
    return tuple(out)


def _date(t: Table, key: str) -> dt.date:
    value = t.data[key]
    hint = "write a bare TOML date without quotes, e.g. expires = 2027-03-31"
    if isinstance(value, str):
        raise t.error(key, f"expected a date, got a string ({value!r})", hint)
    if isinstance(value, dt.datetime) or not isinstance(value, dt.date):
        raise t.error(key, "expected a date (no time of day)", hint)
    return value
