"""The loops of a design at many parameter points, as arrays (one row per point).

For each plant variant the loop ``L = C·P·H·e^(−sT)`` is split into a *fixed* factor, the
same at every point (the controller and every root no parameter moves), and per-point
arrays: the roots that move, the gain and the delay.  A zpk root or gain written as a name
becomes a column directly (vectorised over the points); a tf or ss block that uses a name
is read and factored point by point through the design's own form readers, so every check
of the loader applies.

Conventions: frequencies rad/s (a zpk root written in Hz is scaled by 2π, as the loader
does), delays s; ``zeros``/``poles`` have shape (points, roots).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..design.forms import FORMS, Table, read_form
from ..design.model import Design
from ..design.parameters import ParameterSpace, substitute_tables
from ..errors import DesignError
from ..lti import ComplexArray, FloatArray, Zpk

__all__ = ["SampleLoops", "sample_loops", "swept_variants"]


@dataclass(frozen=True, eq=False)
class SampleLoops:
    """One plant variant's loop at N points: ``L_i = fixed · gain_i · Π(s−z_i)/Π(s−p_i) ·
    e^(−s·delay_i)``.  Plain arrays and a Zpk: picklable, for worker processes."""

    variant: str
    fixed: Zpk
    zeros: ComplexArray          # (N, a)
    poles: ComplexArray          # (N, b)
    gain: FloatArray             # (N,)
    delay_s: FloatArray          # (N,)
    # First columns of conjugate pairs (columns j, j + 1 hold r and conj(r) in every row):
    # evaluated together, one logarithm and one arctangent per pair.
    zero_pairs: tuple[int, ...] = ()
    pole_pairs: tuple[int, ...] = ()

    @property
    def size(self) -> int:
        return int(self.gain.size)

    def rows(self, sl: slice | np.ndarray) -> SampleLoops:
        """The loops of the points ``sl`` only."""
        return SampleLoops(self.variant, self.fixed, self.zeros[sl], self.poles[sl],
                           self.gain[sl], self.delay_s[sl], self.zero_pairs, self.pole_pairs)


def swept_variants(design: Design) -> tuple[int, ...]:
    """Indices of the plant variants whose loop depends on a parameter (measured: never)."""
    space = design.parameters
    if space is None:
        return ()
    places = [w for ws in space.uses.values() for w in ws]
    sensor_named = any(w.startswith("sensor.") for w in places)
    plant_delay_named = any(w == "plant.delay" for w in places)
    out = []
    for i, v in enumerate(design.variants):
        if v.measured is not None:
            continue
        prefix = "plant." if i == 0 else f"plant.variants[{i}]."
        own = any(w.startswith(prefix) and (i > 0 or not w.startswith("plant.variants"))
                  for w in places)
        raw = space.plant if i == 0 else space.plant["variants"][i - 1]
        inherits = i > 0 and "delay" not in raw and plant_delay_named
        if own or inherits or sensor_named:
            out.append(i)
    return tuple(out)


def _spec(value: Any, index: Mapping[str, int]) -> tuple[str, float | int]:
    """("const", x) or ("param", column) for one number-or-name of the design file."""
    if isinstance(value, str):
        return "param", index[value]
    return "const", float(value)


def _value(spec: tuple[str, float | int], X: FloatArray) -> FloatArray:
    kind, v = spec
    if kind == "param":
        return X[:, int(v)]
    return np.full(X.shape[0], float(v))


def _zpk_block(table: Mapping[str, Any], index: Mapping[str, int], X: FloatArray,
               scale: float) -> tuple[list[complex], list[complex], list[FloatArray],
                                      list[FloatArray], FloatArray]:
    """A zpk form: fixed roots, per-point root columns (complex) and the gain column."""
    fz: list[complex] = []
    fp: list[complex] = []
    vz: list[FloatArray] = []
    vp: list[FloatArray] = []
    for key, fixed, varying in (("zeros", fz, vz), ("poles", fp, vp)):
        for item in table.get(key, []):
            if isinstance(item, list):
                re, im = _spec(item[0], index), _spec(item[1], index)
                if re[0] == "const" and im[0] == "const":
                    fixed += [complex(re[1], im[1]) * scale, complex(re[1], -im[1]) * scale]
                    continue
                r, i = _value(re, X), _value(im, X)
                varying.append(((r + 1j * i) * scale, (r - 1j * i) * scale))
            else:
                spec = _spec(item, index)
                if spec[0] == "const":
                    fixed.append(complex(spec[1]) * scale)
                else:
                    varying.append(_value(spec, X).astype(complex) * scale)
    gain = _value(_spec(table["gain"], index), X)
    return fz, fp, vz, vp, gain


def _form_pointwise(table: Mapping[str, Any], form: str, where: str, space: ParameterSpace,
                    X: FloatArray, file: str, hz: bool
                    ) -> tuple[ComplexArray, ComplexArray, FloatArray]:
    """A tf or ss block read at every point through the loader's form reader."""
    zs, ps, gs = [], [], []
    for row in X:
        values = space.values(row)
        sub, _ = substitute_tables({form: table[form]}, None, values, file=file)
        t = Table(sub, where, file, hz)
        try:
            model, _ = read_form(t, where)
        except DesignError as exc:
            point = ", ".join(f"{k} = {v:g}" for k, v in values.items())
            raise DesignError(f"at {point}: {exc.what}", file=file, where=exc.where,
                              hint="narrow the parameter ranges") from None
        zs.append(model.zeros)
        ps.append(model.poles)
        gs.append(model.gain)
    if len({z.size for z in zs}) > 1 or len({p.size for p in ps}) > 1:
        raise DesignError("the block changes its number of roots inside the parameter "
                          "ranges", file=file, where=f"{where}.{form}",
                          hint="keep the leading coefficients away from 0")
    return np.array(zs, dtype=complex), np.array(ps, dtype=complex), np.array(gs)


def _block(table: Mapping[str, Any], where: str, design: Design, X: FloatArray,
           index: Mapping[str, int]) -> tuple[list[complex], list[complex], list[Any],
                                               list[Any], FloatArray]:
    space = design.parameters
    assert space is not None
    hz = design.frequency_unit == "hz"
    form = next(f for f in FORMS if f in table)
    if form == "zpk":
        return _zpk_block(table["zpk"], index, X, 2.0 * math.pi if hz else 1.0)
    z, p, g = _form_pointwise(table, form, where, space, X, design.path, hz)
    return [], [], list(z.T), list(p.T), g


def sample_loops(design: Design, variant_index: int, X: FloatArray) -> SampleLoops:
    """The loop around plant variant ``variant_index`` at each row of ``X``.

    ``X`` has one column per parameter of ``design.parameters`` (in their order).
    """
    space = design.parameters
    assert space is not None
    X = np.atleast_2d(np.asarray(X, dtype=float))
    index = {name: i for i, name in enumerate(space.names)}
    raw = space.plant if variant_index == 0 else space.plant["variants"][variant_index - 1]
    where = "plant" if variant_index == 0 else f"plant.variants[{variant_index}]"
    fz, fp, vz, vp, gain = _block(raw, where, design, X, index)
    delay_raw = raw.get("delay", space.plant.get("delay", 0.0) if variant_index else 0.0)
    delay = _value(_spec(delay_raw, index), X)
    if space.sensor is not None:
        sz, sp, svz, svp, sgain = _block(space.sensor, "sensor", design, X, index)
        fz, fp, vz, vp = fz + sz, fp + sp, vz + svz, vp + svp
        gain = gain * sgain
        delay = delay + _value(_spec(space.sensor.get("delay", 0.0), index), X)
    ctrl = Zpk.constant(1.0)
    for st in design.controller:
        ctrl = ctrl * st.model
    fixed = ctrl * Zpk(np.array(fz, dtype=complex), np.array(fp, dtype=complex), 1.0)
    n = X.shape[0]

    def stack(cols: Sequence[Any]) -> tuple[ComplexArray, tuple[int, ...]]:
        flat, pairs = [], []
        for c in cols:
            if isinstance(c, tuple):            # a conjugate pair from a zpk form
                pairs.append(len(flat))
                flat += list(c)
            else:
                flat.append(c)
        if not flat:
            return np.zeros((n, 0), dtype=complex), ()
        return np.column_stack([np.asarray(c, dtype=complex) for c in flat]), tuple(pairs)

    zeros, zero_pairs = stack(vz)
    poles, pole_pairs = stack(vp)
    return SampleLoops(design.variants[variant_index].name, fixed, zeros, poles,
                       np.asarray(gain, dtype=float), np.asarray(delay, dtype=float),
                       zero_pairs, pole_pairs)
