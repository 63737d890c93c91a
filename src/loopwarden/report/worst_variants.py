"""The sweep's worst points as ``[[plant.variants]]`` tables to paste into a design file.

One table per distinct worst point (figures sharing a point share a table), named after
the figures it is worst for; the plant table of the variant where it occurred, with the
parameters' values written in.  A sensor that uses parameters cannot be part of a plant
variant: its values are given in a comment.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from ..design.forms import FORMS
from ..design.parameters import substitute_tables
from .review import Review

__all__ = ["worst_variants_toml"]


def _number(x: float) -> str:
    if not math.isfinite(x):
        raise ValueError("non-finite value in a plant table")
    text = repr(float(x))
    return text


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return _number(float(v))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, Mapping):
        return "{ " + ", ".join(f"{k} = {_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


def worst_variants_toml(review: Review) -> str:
    """TOML text (empty when the review has no sweep)."""
    unc = review.uncertainty
    space = review.design.parameters
    if unc is None or unc.sweep is None or space is None:
        return ""
    sw = unc.sweep
    groups: dict[tuple[tuple[float, ...], str], list[str]] = {}
    for figure, wp in sw.worst.items():
        if wp is not None:
            groups.setdefault((wp.point, wp.variant), []).append(figure)
    lines = [f"# Worst points of the sweep of {review.design.name} ({sw.samples} samples, "
             f"{sw.corners} corners, seed {sw.settings.seed})"]
    names = [v.name for v in review.design.variants]
    for (point, variant), figures in groups.items():
        values = sw.values(point)
        plant, sensor = substitute_tables(space.plant, space.sensor, values,
                                          file=review.design.path)
        i = names.index(variant)
        table = plant if i == 0 else plant["variants"][i - 1]
        delay = table.get("delay", plant.get("delay") if i > 0 else None)
        title = "worst " + ", ".join(figures)
        lines += ["", "[[plant.variants]]", f"name = {_value(title)}"]
        lines.append("# at " + ", ".join(f"{k} = {v!r}" for k, v in values.items())
                     + f" (plant variant {variant!r})")
        for form in FORMS:
            if form in table:
                lines.append(f"{form} = {_value(table[form])}")
        if delay is not None:
            lines.append(f"delay = {_value(delay)}")
        if sensor is not None and any(w.startswith("sensor.") for ws in space.uses.values()
                                      for w in ws):
            lines.append(f"# the sensor at this point: {_value({k: sensor[k] for k in sensor})}")
    return "\n".join(lines) + "\n"
