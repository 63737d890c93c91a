"""Uncertain plant parameters: the ``[parameters]`` and ``[sweep]`` tables.

A string where a plant, plant-variant or sensor number is expected names a parameter of the
``[parameters]`` table::

    [parameters]
    K  = { nominal = 130.0, min = 100.0, max = 160.0 }              # uniform by default
    wr = { nominal = 40.0, min = 34.0, max = 46.0, distribution = "normal", sigma = 2.0 }

    [plant]
    zpk = { zeros = [], poles = [0.0, "p1", -40.0], gain = "K" }
    delay = "Td"

Names may stand for zpk gains and roots (each part of a complex pair ``["re", "im"]``),
tf and ss coefficients and delays, in ``[plant]``, ``[[plant.variants]]`` and
``[sensor]``; never in the controller.  Values are in the file's own units (a zpk root in
Hz when ``frequency_unit = "hz"``).  The nominal review uses the nominal values.

Distributions: ``uniform`` (default) on [min, max]; ``normal`` with mean ``nominal`` and
standard deviation ``sigma``, truncated to [min, max]; ``log-uniform`` (uniform in
``ln|x|``; min and max of one sign).  They shape the random sample of a sweep (and so its
pass fractions); the worst-case search covers the whole box [min, max] whatever the
distribution.

This module reads both tables and substitutes values for names in the raw TOML data; the
loader validates the substituted tables as it does any plant.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

from ..errors import DesignError, did_you_mean
from .forms import FORMS, Table

__all__ = ["DISTRIBUTIONS", "MAX_SAMPLES", "Parameter", "ParameterSpace", "SweepSettings",
           "read_parameters", "read_sweep", "substitute_tables"]

DISTRIBUTIONS = ("uniform", "normal", "log-uniform")
#: Largest ``[sweep] samples`` accepted (memory and time grow linearly with it).
MAX_SAMPLES = 1_000_000
#: Largest number of parameters (each adds a dimension to the box).
MAX_PARAMETERS = 64
_KEYS = ("nominal", "min", "max", "distribution", "sigma")
#: Tables whose forms and delays may hold names.
_SWEPT_KEYS = (*FORMS, "delay")


@dataclass(frozen=True, slots=True, kw_only=True)
class Parameter:
    """One uncertain parameter, in the units of the place it is used."""

    name: str
    nominal: float
    min: float
    max: float
    distribution: str = "uniform"       # "uniform" | "normal" | "log-uniform"
    sigma: float | None = None          # normal only

    def from_unit(self, u: np.ndarray) -> np.ndarray:
        """Map ``u`` in [0, 1] to the parameter's distribution (inverse CDF)."""
        u = np.clip(np.asarray(u, dtype=float), 0.0, 1.0)
        if self.distribution == "uniform":
            return self.min + u * (self.max - self.min)
        if self.distribution == "log-uniform":
            sign = math.copysign(1.0, self.min)
            lo, hi = sorted((math.log(abs(self.min)), math.log(abs(self.max))))
            if sign < 0:
                u = 1.0 - u                 # keep the map increasing in x
            return sign * np.exp(lo + u * (hi - lo))
        from scipy.stats import truncnorm

        assert self.sigma is not None
        a = (self.min - self.nominal) / self.sigma
        b = (self.max - self.nominal) / self.sigma
        return np.clip(truncnorm.ppf(u, a, b, loc=self.nominal, scale=self.sigma),
                       self.min, self.max)


@dataclass(frozen=True, slots=True, kw_only=True)
class SweepSettings:
    """``[sweep]``: how many random samples, the seed, corners, the worst-case search."""

    samples: int = 2000
    seed: int = 0
    corners: bool = True
    worst_case: bool = True


@dataclass(frozen=True, slots=True, kw_only=True)
class ParameterSpace:
    """The design's parameters and the raw plant and sensor tables that name them.

    ``plant`` and ``sensor`` are the TOML tables exactly as written (names unresolved);
    :func:`substitute_tables` gives them with numbers for any point of the box.
    ``uses`` maps each name to the places (``plant.zpk.gain``) where it appears.
    """

    parameters: tuple[Parameter, ...]
    plant: Mapping[str, Any]
    sensor: Mapping[str, Any] | None
    uses: Mapping[str, tuple[str, ...]] = field(default_factory=lambda: MappingProxyType({}))

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    @property
    def nominal(self) -> dict[str, float]:
        return {p.name: p.nominal for p in self.parameters}

    @property
    def lower(self) -> np.ndarray:
        return np.array([p.min for p in self.parameters])

    @property
    def upper(self) -> np.ndarray:
        return np.array([p.max for p in self.parameters])

    def values(self, point: Sequence[float]) -> dict[str, float]:
        """``{name: value}`` for a point of the box (one value per parameter, in order)."""
        return {p.name: float(x) for p, x in zip(self.parameters, point, strict=True)}


# ---------------------------------------------------------------------- reading
def read_parameters(t: Table) -> tuple[Parameter, ...]:
    """The ``[parameters]`` table: one inline table per name."""
    if not t.data:
        raise t.error(None, "the table names no parameter",
                      'add e.g. K = { nominal = 1.0, min = 0.8, max = 1.2 }, or remove it')
    if len(t.data) > MAX_PARAMETERS:
        raise t.error(None, f"{len(t.data)} parameters; at most {MAX_PARAMETERS} are swept")
    out = []
    for name, value in t.data.items():
        if not isinstance(value, dict):
            raise t.error(name, "expected a table { nominal = ..., min = ..., max = ... }",
                          f'write {name} = {{ nominal = 1.0, min = 0.8, max = 1.2 }}')
        out.append(_parameter(t.sub(name, value), name))
    return tuple(out)


def _parameter(pt: Table, name: str) -> Parameter:
    pt.check_keys(_KEYS, required=("nominal", "min", "max"))
    nominal = pt.number("nominal")
    lo = pt.number("min")
    hi = pt.number("max")
    if not lo < hi:
        raise pt.error("max", f"expected max above min, got min = {lo:g} and max = {hi:g}",
                       "a fixed value is written as a plain number in the plant")
    if not lo <= nominal <= hi:
        raise pt.error("nominal", f"the nominal value {nominal:g} lies outside the range "
                       f"{lo:g} .. {hi:g}", "widen the range or move the nominal value")
    dist = pt.choice("distribution", DISTRIBUTIONS, default="uniform")
    sigma = None
    if dist == "normal":
        if not pt.has("sigma"):
            raise pt.error("sigma", "a normal distribution needs its standard deviation "
                           "'sigma'", f'e.g. sigma = {(hi - lo) / 6.0:g}')
        sigma = pt.number("sigma", above=0.0)
    elif pt.has("sigma"):
        raise pt.error("sigma", f"'sigma' applies only to distribution = \"normal\", not "
                       f"{dist!r}")
    if dist == "log-uniform" and not lo * hi > 0:
        raise pt.error("min", f"a log-uniform range must not contain 0, got {lo:g} .. {hi:g}",
                       "use a uniform distribution, or a range of one sign")
    return Parameter(name=name, nominal=nominal, min=lo, max=hi, distribution=dist,
                     sigma=sigma)


def read_sweep(t: Table) -> SweepSettings:
    """The ``[sweep]`` table (every key optional)."""
    t.check_keys(("samples", "seed", "corners", "worst_case"))
    samples = _whole(t, "samples", 2000, 1, MAX_SAMPLES)
    seed = _whole(t, "seed", 0, 0, 2**32 - 1)
    return SweepSettings(samples=samples, seed=seed, corners=_flag(t, "corners", True),
                         worst_case=_flag(t, "worst_case", True))


def _whole(t: Table, key: str, default: int, lo: int, hi: int) -> int:
    if not t.has(key):
        return default
    value = t.data[key]
    if isinstance(value, bool) or not isinstance(value, int):
        raise t.error(key, f"expected a whole number, got {value!r}")
    if not lo <= value <= hi:
        raise t.error(key, f"expected a whole number within {lo} .. {hi}, got {value}")
    return value


def _flag(t: Table, key: str, default: bool) -> bool:
    if not t.has(key):
        return default
    value = t.data[key]
    if not isinstance(value, bool):
        raise t.error(key, f"expected true or false, got {value!r}")
    return value


# ---------------------------------------------------------------------- substitution
def _substitute(value: Any, where: str, lookup: Callable[[str, str], float],
                uses: dict[str, list[str]]) -> Any:
    if isinstance(value, str):
        uses.setdefault(value, []).append(where)
        return lookup(value, where)
    if isinstance(value, list):
        return [_substitute(v, f"{where}[{i + 1}]", lookup, uses) for i, v in enumerate(value)]
    if isinstance(value, dict):
        return {k: _substitute(v, f"{where}.{k}", lookup, uses) for k, v in value.items()}
    return value


def _swept_table(data: Mapping[str, Any], where: str, lookup: Callable[[str, str], float],
                 uses: dict[str, list[str]]) -> dict[str, Any]:
    """``data`` with names replaced in its forms and delay (other keys untouched)."""
    out = dict(data)
    for key in _SWEPT_KEYS:
        if key in out:
            out[key] = _substitute(out[key], f"{where}.{key}", lookup, uses)
    return out


def substitute_tables(plant: Mapping[str, Any], sensor: Mapping[str, Any] | None,
                      values: Mapping[str, float], *, file: str,
                      uses: dict[str, list[str]] | None = None
                      ) -> tuple[dict[str, Any], dict[str, Any] | None]:
    """The ``[plant]`` (with its variants) and ``[sensor]`` tables with numbers for names.

    Raises
    ------
    DesignError
        A string that names no parameter, at its place in the file.
    """
    uses = {} if uses is None else uses

    def lookup(name: str, where: str) -> float:
        if name not in values:
            hint = did_you_mean(name, values) or (
                "parameters: " + ", ".join(values) if values else
                "numbers are written without quotes; a name needs a [parameters] table")
            raise DesignError(f"unknown parameter {name!r}", file=file, where=where,
                              hint=hint)
        return values[name]

    out = _swept_table(plant, "plant", lookup, uses)
    variants = plant.get("variants")
    if isinstance(variants, list):
        out["variants"] = [_swept_table(v, f"plant.variants[{i + 1}]", lookup, uses)
                           if isinstance(v, dict) else v for i, v in enumerate(variants)]
    sensor_out = (_swept_table(sensor, "sensor", lookup, uses)
                  if isinstance(sensor, dict) else sensor)
    return out, sensor_out


def check_used(params: Sequence[Parameter], uses: Mapping[str, Sequence[str]],
               file: str) -> None:
    """Every parameter is named somewhere in the plant, its variants or the sensor."""
    for p in params:
        if p.name not in uses:
            raise DesignError(f"parameter {p.name!r} is not used",
                              file=file, where=f"parameters.{p.name}",
                              hint="name it where a plant or sensor number goes (e.g. "
                                   f'gain = "{p.name}"), or remove it')
