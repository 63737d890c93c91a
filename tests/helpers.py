"""Loop designs (TOML text) shared by several test files.

Ogata's lag design (REFERENCE_VALUES.md, Ogata, Modern Control Engineering [memory,
matched]): G = 1/(s(s+1)(0.5s+1)), written as 2/(s(s+1)(s+2)), with
Gc = 5(10s+1)/(100s+1), written as a gain 0.5 and a lag with zero 0.1 and pole 0.01.
The reference values each test checks stand beside its check.
"""

from __future__ import annotations

import numpy as np
import pytest

from loopwarden.lti import Zpk
from loopwarden.lti_discrete import tustin

#: The plant line of Ogata's lag design.
OGATA_PLANT = "zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }"


def lag_design(plant: str, gain: float, zero: float, pole: float, extra: str = "", *,
               name: str = "new lag loop") -> str:
    """A design of ``plant`` (its TOML lines) under a gain stage and a lag stage."""
    return f"""
[design]
name = "{name}"
[plant]
{plant}
[[controller]]
type = "gain"
k = {gain!r}
[[controller]]
type = "lag"
zero = {zero!r}
pole = {pole!r}
{extra}"""


def ogata_lag_design(name: str) -> str:
    """Ogata's lag design under the design name ``name``."""
    return lag_design(OGATA_PLANT, 0.5, 0.1, 0.01, name=name)


OGATA_TOML = ogata_lag_design("Ogata lag design")

#: 1/(s(s+1)) with the lag (s + 0.1)/(s + 0.01) alone.
FPE_TOML = """
[design]
name = "FPE lag example"
[plant]
zpk = { poles = [0.0, -1.0], gain = 1.0 }
[[controller]]
type = "lag"
zero = 0.1
pole = 0.01
"""

# Lag loops that are not in the repository (our own scenarios, rad/s).
NEW_LAG_DESIGNS = [
    pytest.param(lag_design("zpk = { poles = [0.0, -5.0], gain = 20.0 }", 1.0, 0.2, 0.02),
                 id="conveyor-axis"),
    pytest.param(lag_design("zpk = { poles = [-1.0, -5.0], gain = 20.0 }", 2.0, 0.3, 0.03),
                 id="tank-level-type0"),
    pytest.param(lag_design("tf = { num = [9.0], den = [1.0, 2.0, 9.0, 0.0] }", 0.5, 0.05,
                            0.005), id="gimbal-resonant"),
    pytest.param(lag_design("zpk = { poles = [0.0, -2.0], gain = 1.0 }\ndelay = 0.05", 3.0,
                            0.1, 0.025), id="pump-with-delay"),
]

SAMPLED_T = 0.05
#: FPE lag loop 10(10s+1)/(s(s+1)(100s+1)) = (s+0.1)/(s(s+1)(s+0.01)), digital at
#: SAMPLED_T (ZOH-sampled plant, lag discretised by Tustin).
FPE_SAMPLED = FPE_TOML + f'\n[sampling]\nperiod = {SAMPLED_T!r}\nmethod = "tustin"\n'

Z_LAG = tustin(Zpk([-0.1], [-0.01], 1.0), SAMPLED_T)


def z_stage_design() -> str:
    """The FPE loop with the Tustin lag written directly in z."""
    num = np.real(np.poly(Z_LAG.zeros)) * Z_LAG.gain
    den = np.real(np.poly(Z_LAG.poles))
    return f"""
[design]
name = "FPE lag loop, digital lag in z"
[plant]
zpk = {{ poles = [0.0, -1.0], gain = 1.0 }}
[[controller]]
type = "tf"
domain = "z"
num = [{float(num[0])!r}, {float(num[1])!r}]
den = [{float(den[0])!r}, {float(den[1])!r}]
[sampling]
period = {SAMPLED_T!r}
"""
