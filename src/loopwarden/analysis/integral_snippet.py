"""The TOML snippet that replaces the lag stage by the integral alternative.
"""

from __future__ import annotations

import numpy as np

from ..design.model import Stage
from ..lti import Zpk


def _num(x: float) -> str:
    return f"{x:.10g}"


def _num_z(x: float) -> str:
    return f"{x:.17g}"


def _toml_string(text: str) -> str:
    """A TOML basic string (the loader allows no control characters in a stage name)."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _snippet(stage: Stage, new_model: Zpk, k: float, target_deg: float, met: bool,
             variants: int = 1) -> str:
    where = "s = 0" if stage.domain == "s" else "z = 1"
    head = [f"# Integral-action alternative to {stage.name}: its lowest pole moved to {where},",
            f"# overall loop gain x{k:.6g} folded in "
            f"(phase margin {'>=' if met else 'best reachable below'} {target_deg:.2f} deg)."]
    if variants > 1:
        head.append(f"# One controller for all {variants} plant variants: the worst sets k.")
    head.append(f"# Replace {stage.name} with:")
    if stage.type == "lag" and stage.domain == "s":
        zero = float(-new_model.zeros[0].real)
        kp = k * new_model.gain
        body = ["[[controller]]", 'type = "pi"', f"kp = {_num(kp)}", f"ti = {_num(1.0 / zero)}"]
        if stage.title is not None:
            body.insert(1, f"name = {_toml_string(stage.title)}")
    else:
        # tf coefficients are in s (rad/s) whatever the design's frequency unit, or in z.
        num = np.real(np.poly(new_model.zeros)) * new_model.gain * k
        den = np.real(np.poly(new_model.poles))
        body = ["[[controller]]", 'type = "tf"']
        if stage.title is not None:
            body.insert(1, f"name = {_toml_string(stage.title)}")
        # A digital filter's coefficients near 1 carry its poles: all 17 digits in z.
        put = _num
        if stage.domain == "z":
            body.append('domain = "z"')
            put = _num_z
        body += ["num = [" + ", ".join(put(float(c)) for c in num) + "]",
                 "den = [" + ", ".join(put(float(c)) for c in den) + "]"]
    return "\n".join(head + body) + "\n"
