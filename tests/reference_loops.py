"""Loops for the certified-root reference tests, written as design files (TOML text).

Each builder returns the design text; the numbers in it are the exact double-precision
values the references in ``tests/data/reference_roots.json`` were computed from (the
script ``tests/data/make_reference_roots.py`` imports this module, so both sides read the
same numbers).  Helpers here use numpy/scipy only; mpmath is needed only to regenerate the
data file.

Sources of the references (see the make script for the cross-checks):

* furnace-like loops, 400-pole cluster, sampled lag loops: roots and residues at 50 digits
  in mpmath from the exact coefficients of the design file [derived];
* delay loops: roots of the exact quasi-polynomial D(s) + N(s)·e^{−sT} by Newton in mpmath,
  complete right of a line by an argument-principle count [derived];
* L = k·e^{−sT}/(s + a): Lambert W closed form [derived] (computed in the tests).
"""

from __future__ import annotations

import json
import math
from functools import cache
from pathlib import Path

import numpy as np

DATA = Path(__file__).resolve().parent / "data" / "reference_roots.json"
BAND = 0.02


def design(text: str, name: str = "reference.toml"):
    """A validated design from TOML text (the loader the tests use).  Imported here so
    that the make script, which only needs the numbers, never loads loopwarden."""
    from loopwarden.design.loader import parse_design

    return parse_design(text, name)


@cache
def reference_data() -> dict:
    """The precomputed references (``tests/data/reference_roots.json``)."""
    return json.loads(DATA.read_text(encoding="utf-8"))


def as_complex(pairs) -> np.ndarray:
    """``[[re, im], ...]`` from the data file → complex array."""
    return np.array([complex(re, im) for re, im in pairs], dtype=complex)


def _floats(values) -> str:
    return ", ".join(repr(float(v)) for v in values)


# --------------------------------------------------------------------------- furnace-like
#: Plant poles of the furnace-like loop, rad/s (a slow thermal mass to a fast actuator).
FURNACE_POLES = (1e-3, 5e-2, 1.0, 300.0, 2e3, 5e3, 1e4)
#: Its denominator Π(s + p_i) in descending powers, as np.poly gives it in doubles:
#: coefficients from 1 to 3.15e13.  These doubles define the tf designs exactly; the
#: references are computed from them (not from the poles above).
FURNACE_DEN = (1.0, 17301.051, 85118182.35105, 124089440983.16505, 30130328344355.867,
               31536330204254.99, 1531506200000.0, 1500000000.0000002)
#: Numerator for a DC gain of 2 (2·Π p_i = 3e9).
FURNACE_NUM = (3e9,)
#: The same plant with a slow right-half-plane zero at +1e-4 rad/s and the same |DC gain|:
#: 3e13·(s − 1e-4).  Its DC gain is −2, so with the lag's DC boost the loop has
#: L(0) < −1 and the characteristic polynomial's constant term is negative.
FURNACE_RHP_NUM = (3e13, -3e9)
FURNACE_GAIN = 10.0
FURNACE_LAG = (0.003, 0.0003)          # zero, pole (rad/s), hf-normalised (s + z)/(s + p)


def furnace_tf(num=FURNACE_NUM, *, name: str = "furnace zone (tf)") -> str:
    """Furnace-like plant in tf form under a gain and a lag."""
    return f"""
[design]
name = "{name}"
[plant]
tf = {{ num = [{_floats(num)}], den = [{_floats(FURNACE_DEN)}] }}
[[controller]]
type = "gain"
k = {FURNACE_GAIN!r}
[[controller]]
type = "lag"
zero = {FURNACE_LAG[0]!r}
pole = {FURNACE_LAG[1]!r}
"""


def furnace_zpk(*, rhp_zero: bool = False, name: str = "furnace zone (zpk)") -> str:
    """The same loop with the plant in zpk form: gain 3e9 on the monic factors, or with
    the slow RHP zero, 3e13·(s − 1e-4)/Π(s + p_i)."""
    zeros, gain = ((-FURNACE_RHP_NUM[1] / FURNACE_RHP_NUM[0],), FURNACE_RHP_NUM[0]) \
        if rhp_zero else ((), 3e9)
    return f"""
[design]
name = "{name}"
[plant]
zpk = {{ zeros = [{_floats(zeros)}], poles = [{_floats(-p for p in FURNACE_POLES)}], \
gain = {gain!r} }}
[[controller]]
type = "gain"
k = {FURNACE_GAIN!r}
[[controller]]
type = "lag"
zero = {FURNACE_LAG[0]!r}
pole = {FURNACE_LAG[1]!r}
"""


# --------------------------------------------------------------------------- pole chains
CHAIN_N = 60
#: Critical gain of K/(s + 1)^60 [derived]: the phase reaches −180° where
#: 60·atan ω = π, i.e. ω = tan(π/60), and there |L| = K·cos(π/60)^60.
CHAIN_K_CRIT = 1.0 / math.cos(math.pi / CHAIN_N) ** CHAIN_N
CHAIN_K = 100.0 * CHAIN_K_CRIT


def chain_design(n: int, gain: float, *, name: str = "pole chain") -> str:
    """``gain/(s + 1)^n`` under a unity gain stage (the n poles written out)."""
    return f"""
[design]
name = "{name}"
[plant]
zpk = {{ zeros = [], poles = [{", ".join(["-1.0"] * n)}], gain = {gain!r} }}
[[controller]]
type = "gain"
k = 1.0
"""


def chain_roots(n: int, gain: float) -> np.ndarray:
    """Roots of (s + 1)^n + K = 0 [derived]: −1 + K^{1/n}·e^{j(2m+1)π/n}, m = 0..n−1."""
    m = np.arange(n)
    return -1.0 + gain ** (1.0 / n) * np.exp(1j * (2 * m + 1) * np.pi / n)


CLUSTER_N = 400
#: 400 distinct stable plant poles spread evenly over [−1.2, −1.0].
CLUSTER_POLES = tuple(-(1.0 + 0.2 * i / (CLUSTER_N - 1)) for i in range(CLUSTER_N))
CLUSTER_GAIN = 0.5


def cluster_design(*, name: str = "pole cluster") -> str:
    return f"""
[design]
name = "{name}"
[plant]
zpk = {{ zeros = [], poles = [{_floats(CLUSTER_POLES)}], gain = {CLUSTER_GAIN!r} }}
[[controller]]
type = "gain"
k = 1.0
"""


# --------------------------------------------------------------------------- delay loops
def lambert_design(k: float, a: float, delay: float, *, name: str = "delay loop") -> str:
    """``L = k·e^{−s·delay}/(s + a)`` (a = 0: an integrator)."""
    return f"""
[design]
name = "{name}"
[plant]
zpk = {{ zeros = [], poles = [{-a!r}], gain = {k!r} }}
delay = {delay!r}
[[controller]]
type = "gain"
k = 1.0
"""


def lambert_roots(k: float, a: float, delay: float, branches: int = 400) -> np.ndarray:
    """Roots of s + a + k·e^{−sT} = 0 [derived]: s = −a + W_n(−kT·e^{aT})/T, one per branch
    n of the Lambert W function, n = −branches..branches."""
    from scipy.special import lambertw

    x = -k * delay * math.exp(a * delay)
    out = [-a + complex(lambertw(x, n)) / delay for n in range(-branches, branches + 1)]
    return np.array(out, dtype=complex)


#: District-heating substation: supply temperature K/((τ1 s + 1)(τ2 s + 1)) behind a 20 s
#: transport delay; τ1 = 120 s, τ2 = 30 s, K = 1.5 (den 3600 s² + 150 s + 1).
DH_NUM = (1.5,)
DH_DEN = (3600.0, 150.0, 1.0)
DH_DELAY = 20.0
DH_PI = (2.0, 250.0)                    # kp, ti (s): PI zero at 1/250 = 0.004 rad/s
DH_LAG = (2.5, 0.004, 0.0004)           # gain, lag zero, lag pole (rad/s)


def district_heating_pi(*, name: str = "district heating supply (PI)") -> str:
    return f"""
[design]
name = "{name}"
[plant]
tf = {{ num = [{_floats(DH_NUM)}], den = [{_floats(DH_DEN)}] }}
delay = {DH_DELAY!r}
[[controller]]
type = "pi"
kp = {DH_PI[0]!r}
ti = {DH_PI[1]!r}
"""


def district_heating_lag(*, name: str = "district heating supply (lag)") -> str:
    return f"""
[design]
name = "{name}"
[plant]
tf = {{ num = [{_floats(DH_NUM)}], den = [{_floats(DH_DEN)}] }}
delay = {DH_DELAY!r}
[[controller]]
type = "gain"
k = {DH_LAG[0]!r}
[[controller]]
type = "lag"
zero = {DH_LAG[1]!r}
pole = {DH_LAG[2]!r}
"""


#: Gimbal-like resonant plant 4/(s² + 0.2 s + 4) (ζ = 0.05, ωn = 2 rad/s), 0.2 s delay,
#: under an integrator 0.1/s and a lag (s + 0.01)/(s + 0.002).
RES_NUM = (4.0,)
RES_DEN = (1.0, 0.2, 4.0)
RES_DELAY = 0.2
RES_KI = 0.1
RES_LAG = (0.01, 0.002)


def resonant_delay(*, name: str = "resonant mount with delay") -> str:
    return f"""
[design]
name = "{name}"
[plant]
tf = {{ num = [{_floats(RES_NUM)}], den = [{_floats(RES_DEN)}] }}
delay = {RES_DELAY!r}
[[controller]]
type = "integrator"
k = {RES_KI!r}
[[controller]]
type = "lag"
zero = {RES_LAG[0]!r}
pole = {RES_LAG[1]!r}
"""


def quasi_polynomial(case: str) -> tuple[np.ndarray, np.ndarray, float]:
    """(D, N, T) with the characteristic function F(s) = D(s) + N(s)·e^{−sT} of a delay
    case (descending coefficients, exact products of the design's numbers in doubles
    where they are exact; the make script forms them again in mpmath)."""
    if case == "dh_pi":
        kp, ti = DH_PI
        d = np.polymul(DH_DEN, [1.0, 0.0])                       # s·D_P
        n = kp * DH_NUM[0] * np.array([1.0, 1.0 / ti])           # kp·K·(s + 1/ti)
        return d, n, DH_DELAY
    if case == "dh_lag":
        k, z, p = DH_LAG
        d = np.polymul(DH_DEN, [1.0, p])
        n = k * DH_NUM[0] * np.array([1.0, z])
        return d, n, DH_DELAY
    if case == "resonant":
        z, p = RES_LAG
        d = np.polymul(np.polymul(RES_DEN, [1.0, 0.0]), [1.0, p])
        n = RES_KI * RES_NUM[0] * np.array([1.0, z])
        return d, n, RES_DELAY
    raise KeyError(case)


DELAY_DESIGNS = {"dh_pi": district_heating_pi, "dh_lag": district_heating_lag,
                 "resonant": resonant_delay}


def newton_polish(case: str, s0: complex, steps: int = 60) -> complex:
    """Newton on the exact F(s) = D + N·e^{−sT} in complex128, from ``s0``."""
    d, n, t = quasi_polynomial(case)
    dd, dn = np.polyder(d), np.polyder(n)
    s = complex(s0)
    for _ in range(steps):
        e = np.exp(-s * t)
        f = np.polyval(d, s) + np.polyval(n, s) * e
        df = np.polyval(dd, s) + (np.polyval(dn, s) - t * np.polyval(n, s)) * e
        step = f / df
        s -= step
        if abs(step) <= 1e-15 * max(abs(s), 1e-300):
            break
    return s


# --------------------------------------------------------------------------- sampled loops
#: Sampled loops: plant 1/((2 s + 1)(0.5 s + 1)) held by a ZOH, period 0.1 s.
SAMPLED_PERIOD = 0.1
SAMPLED_NUM = (1.0,)
SAMPLED_DEN = (1.0, 2.5, 1.0)
#: Lag written in z: zero at e^{−0.05·T}, pole at e^{−0.005·T} (images of 0.05 and 0.005
#: rad/s), gain 3.
SAMPLED_Z_GAIN = 6.0
SAMPLED_Z_LAG = (math.exp(-0.02 * SAMPLED_PERIOD), math.exp(-0.002 * SAMPLED_PERIOD))
#: Lag written in s and discretised by the design's ZOH method; one sample of compute delay.
SAMPLED_S_GAIN = 6.0
SAMPLED_S_LAG = (0.02, 0.002)


def sampled_z_lag(*, name: str = "pump speed (lag in z)") -> str:
    zq, pq = SAMPLED_Z_LAG
    return f"""
[design]
name = "{name}"
[sampling]
period = {SAMPLED_PERIOD!r}
[plant]
tf = {{ num = [{_floats(SAMPLED_NUM)}], den = [{_floats(SAMPLED_DEN)}] }}
[[controller]]
type = "gain"
k = {SAMPLED_Z_GAIN!r}
[[controller]]
type = "tf"
domain = "z"
num = [1.0, {-zq!r}]
den = [1.0, {-pq!r}]
"""


def sampled_s_lag(*, name: str = "pump speed (lag in s, zoh)") -> str:
    return f"""
[design]
name = "{name}"
[sampling]
period = {SAMPLED_PERIOD!r}
method = "zoh"
compute_delay = 1
[plant]
tf = {{ num = [{_floats(SAMPLED_NUM)}], den = [{_floats(SAMPLED_DEN)}] }}
[[controller]]
type = "gain"
k = {SAMPLED_S_GAIN!r}
[[controller]]
type = "lag"
zero = {SAMPLED_S_LAG[0]!r}
pole = {SAMPLED_S_LAG[1]!r}
"""


SAMPLED_DESIGNS = {"sampled_z_lag": sampled_z_lag, "sampled_s_lag": sampled_s_lag}
