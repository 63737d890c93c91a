"""Loop designs (TOML text) shared by several test files.

Ogata's lag design (REFERENCE_CHECKS.md, Ogata, Modern Control Engineering [memory,
matched]): G = 1/(s(s+1)(0.5s+1)), written as 2/(s(s+1)(s+2)), with
Gc = 5(10s+1)/(100s+1), written as a gain 0.5 and a lag with zero 0.1 and pole 0.01.
The reference values each test checks stand beside its check.
"""

from __future__ import annotations

#: The plant line of Ogata's lag design.
OGATA_PLANT = "zpk = { zeros = [], poles = [0.0, -1.0, -2.0], gain = 2.0 }"

#: Ogata's lag compensator as controller stages.
OGATA_LAG_STAGES = """[[controller]]
type = "gain"
k = 0.5
[[controller]]
type = "lag"
zero = 0.1
pole = 0.01
"""


def ogata_lag_design(name: str) -> str:
    """Ogata's lag design under the design name ``name``."""
    return f'\n[design]\nname = "{name}"\n[plant]\n{OGATA_PLANT}\n{OGATA_LAG_STAGES}'


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
