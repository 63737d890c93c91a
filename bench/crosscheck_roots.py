"""Held-out cross-check of certified closed-loop roots, slow pairs and tails.

A seeded generator of loops in four families (delay + lag, badly scaled rational, resonant
delay, sampled lag) plus open-loop unstable and conditionally stable cases.  For each loop an
independent reference is computed here, without loopwarden's root code:

* rational loops and loops in z: the characteristic polynomial formed in mpmath from the
  exact doubles of the design file, roots by ``mpmath.polyroots`` at 50 digits;
* delay loops: F(s) = D(s) + N(s)·e^{−sT}; the right-half-plane count by an argument-
  principle winding of our own on a rectangle that bounds every root with Re s ≥ 0
  (|D(s)| ≤ |N(s)| there), the roots of a box around the dominant region by Newton from a
  dense start grid, polished by ``mpmath.findroot``, complete when their number equals the
  winding count of the box;
* sampled loops: the ZOH plant formed from the partial fractions of G(s)/s in mpmath
  (G_d(z) = G(0) + Σ Res[G(s)/s, p_i]·(z − 1)/(z − e^{p_i T})), not from a matrix exponential;
* residues by a contour integral (trapezoid rule on a small circle) of T(s)/s, or
  T(z)/(z − 1), at 40 digits; tails by ln(|r|/(band·|y∞|))/σ [derived].

Run from the repository root::

    PYTHONPATH=src python bench/crosscheck_roots.py            # 50 loops per family
    PYTHONPATH=src python bench/crosscheck_roots.py --per-family 3 --seed 7

Prints one row per family and every mismatch.  Not part of the test suite (the subset in
tests/test_crosscheck_roots.py is).
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from dataclasses import dataclass, field

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import mpmath as mp  # noqa: E402
import numpy as np  # noqa: E402

BAND = 0.02
POLE_TOL, RES_TOL, TAIL_TOL = 1e-3, 2e-2, 3e-2
BOOST_CHECKS = ("boost_band", "lag_phase_budget", "integral_alternative")
FAMILIES = ("delay_lag", "scaled", "resonant_delay", "sampled_lag", "special")


# --------------------------------------------------------------------------- loop specs
@dataclass
class Spec:
    """One generated loop: plant (zpk or tf), delay, controller stages, sampling."""

    family: str
    name: str
    plant: tuple            # ("zpk", zeros, poles, gain) or ("tf", num, den)
    stages: list            # ("gain", k) | ("lag", z, p) | ("pi", kp, ti) | ("ztf", num, den)
    delay: float = 0.0
    sampling: tuple | None = None      # (period, method, compute_delay)
    notes: dict = field(default_factory=dict)


def _f(values) -> str:
    return ", ".join(repr(float(v)) for v in values)


def toml_text(sp: Spec) -> str:
    lines = ["[design]", f'name = "{sp.name}"']
    if sp.sampling:
        period, method, cd = sp.sampling
        lines += ["[sampling]", f"period = {period!r}", f'method = "{method}"',
                  f"compute_delay = {cd}"]
    lines.append("[plant]")
    if sp.plant[0] == "zpk":
        _, zeros, poles, gain = sp.plant
        lines.append(f"zpk = {{ zeros = [{_f(zeros)}], poles = [{_f(poles)}], gain = {gain!r} }}")
    else:
        _, num, den = sp.plant
        lines.append(f"tf = {{ num = [{_f(num)}], den = [{_f(den)}] }}")
    if sp.delay:
        lines.append(f"delay = {sp.delay!r}")
    for st in sp.stages:
        lines.append("[[controller]]")
        if st[0] == "gain":
            lines += ['type = "gain"', f"k = {st[1]!r}"]
        elif st[0] == "lag":
            lines += ['type = "lag"', f"zero = {st[1]!r}", f"pole = {st[2]!r}"]
        elif st[0] == "pi":
            lines += ['type = "pi"', f"kp = {st[1]!r}", f"ti = {st[2]!r}"]
        elif st[0] == "ztf":
            lines += ['type = "tf"', 'domain = "z"', f"num = [{_f(st[1])}]",
                      f"den = [{_f(st[2])}]"]
    zs = [st[1] for st in sp.stages if st[0] == "lag"]
    if sp.sampling:
        zs += [-math.log(-st[1][1]) / sp.sampling[0] for st in sp.stages if st[0] == "ztf"]
    if zs:       # limits for the boost family, so that n/a can only mean "not computed"
        lines += ["[requirements]", f"reference_band = {min(zs) / 3.0!r}",
                  "settling_time = 1e6"]
    return "\n".join(lines) + "\n"


def _log_uniform(rng, lo, hi):
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _round(x, digits=4):
    return float(f"{x:.{digits}g}")


def _fopdt_gain(kp_plant: float, taus, delay: float) -> float:
    """A proportional gain near the crossover-based tuning (SIMC-like), for variety."""
    return _round(0.5 * max(taus) / (kp_plant * (delay + 0.5 * sum(taus[1:]) + 1e-9)))


def gen_delay_lag(rng, i) -> Spec:
    n = int(rng.integers(1, 4))
    taus = sorted((_log_uniform(rng, 1.0, 1000.0) for _ in range(n)), reverse=True)
    taus = [_round(t) for t in taus]
    delay = _round(_log_uniform(rng, 0.1, 30.0))
    kpl = _round(_log_uniform(rng, 0.2, 5.0))
    k = _fopdt_gain(kpl, taus, delay) * _round(rng.uniform(0.4, 2.5), 3)
    wc = 1.0 / (delay + 0.5 * taus[0] / max(k * kpl, 1e-3))
    z = _round(wc / rng.uniform(3.0, 30.0))
    beta = _round(rng.uniform(3.0, 15.0), 3)
    poles = [-1.0 / t for t in taus]
    gain = kpl * float(np.prod([1.0 / t for t in taus]))
    form = "tf" if i % 2 else "zpk"
    plant = (("zpk", [], poles, gain) if form == "zpk"
             else ("tf", [gain], list(np.real(np.poly(poles)))))
    return Spec("delay_lag", f"delay lag {i}", plant,
                [("gain", _round(k)), ("lag", z, _round(z / beta))], delay=delay)


def gen_scaled(rng, i) -> Spec:
    decades = rng.uniform(5.0, 7.0)
    n = int(rng.integers(4, 8))
    lo = _log_uniform(rng, 1e-4, 1e-2)
    mags = sorted(lo * 10 ** rng.uniform(0.0, decades, n - 2))
    mags = [lo, *mags, lo * 10 ** decades]
    mags = sorted({_round(m, 3) for m in mags})
    poles = [-m for m in mags]
    rhp = bool(i % 2)
    dc = _round(_log_uniform(rng, 0.5, 5.0))
    gain = dc * float(np.prod(mags))
    zeros = []
    if rhp:
        zr = _round(mags[0] * rng.uniform(0.05, 0.3), 3)
        zeros = [zr]
        gain = gain / zr
    k = _round(_log_uniform(rng, 1.0, 20.0))
    lz = _round(mags[1] * rng.uniform(0.05, 0.5) if not rhp else mags[0] * rng.uniform(1, 5), 3)
    lp = _round(lz / rng.uniform(3.0, 12.0), 3)
    form = "tf" if (i // 2) % 2 else "zpk"
    if form == "zpk":
        plant = ("zpk", zeros, poles, gain)
    else:
        num = [gain] if not zeros else [gain, -gain * zeros[0]]
        plant = ("tf", num, list(np.real(np.poly(poles))))
    return Spec("scaled", f"scaled {i} ({form}{', rhp zero' if rhp else ''})", plant,
                [("gain", k), ("lag", lz, lp)])


def gen_resonant(rng, i) -> Spec:
    """Lightly damped pair ζ 0.01–0.1 at ωn, a slow real pole, a delay, and a lag or PI
    whose low-frequency loop gain k·g (2–20) pulls a closed-loop pole beside its zero;
    the slow pole is placed so that |L(jωn)| ≈ k·g·(slow/ωn)/(2ζ) is about 0.2–1.5."""
    wn = _round(_log_uniform(rng, 0.5, 50.0))
    zeta = _round(rng.uniform(0.01, 0.1), 3)
    kg = _log_uniform(rng, 2.0, 20.0)
    extra = _round(wn * 2 * zeta * rng.uniform(0.2, 1.5) / kg)
    wc = kg * extra
    delay = _round(rng.uniform(0.05, 1.2) / wc, 3)
    den = list(np.polymul([1.0, 2 * zeta * wn, wn * wn], [1.0, extra]))
    g = _log_uniform(rng, 0.3, 3.0)
    num = [_round(wn * wn * extra * g)]
    if i % 2:
        stages = [("pi", _round(kg / g), _round(rng.uniform(3.0, 30.0) / wc))]
    else:
        z = _round(wc / rng.uniform(3.0, 30.0))
        beta = rng.uniform(3.0, 10.0)
        stages = [("gain", _round(kg / g / beta)), ("lag", z, _round(z / beta))]
    return Spec("resonant_delay", f"resonant {i}", ("tf", num, den), stages, delay=delay)


def gen_sampled(rng, i) -> Spec:
    n = int(rng.integers(1, 4))
    taus = sorted({_round(_log_uniform(rng, 0.05, 20.0), 3) for _ in range(n)}, reverse=True)
    poles = [-1.0 / t for t in taus]
    kpl = _round(_log_uniform(rng, 0.5, 5.0))
    gain = kpl * float(np.prod([1.0 / t for t in taus]))
    period = _round(taus[-1] * rng.uniform(0.05, 1.0), 3)
    k = _round(rng.uniform(0.3, 3.0) * max(taus) / (kpl * (sum(taus[1:]) + period + 1e-3)) / 4)
    wc = min(1.0 / period, 1.0 / taus[-1]) * 0.3
    z = _round(wc / rng.uniform(5.0, 50.0), 3)
    p = _round(z / rng.uniform(3.0, 12.0), 3)
    cd = int(rng.integers(0, 2))
    # A loop gain below 1 at DC has no gain crossover (lag_phase_budget rightly n/a): keep
    # the DC loop gain k·K·β at 1.5 or more.
    k = _round(max(k, 1.5 * p / (kpl * z)))
    if i % 2:
        zq, pq = math.exp(-z * period), math.exp(-p * period)
        stages = [("gain", k), ("ztf", [1.0, -zq], [1.0, -pq])]
        method = "tustin"
    else:
        stages = [("gain", k), ("lag", z, p)]
        method = "zoh"
    return Spec("sampled_lag", f"sampled {i}", ("zpk", [], poles, gain), stages,
                sampling=(period, method, cd))


def gen_special(rng, i) -> Spec:
    kind = i % 4
    if kind == 0:      # open-loop unstable rational plant, lag
        a = _round(_log_uniform(rng, 0.1, 2.0))
        b = _round(a * rng.uniform(5, 50))
        k = _round(b * rng.uniform(0.5, 3.0) * 2)
        z = _round(a * rng.uniform(0.05, 0.3))
        return Spec("special", f"unstable plant {i}", ("zpk", [-2 * a], [a, -b], 1.0),
                    [("gain", k), ("lag", z, _round(z / 5))])
    if kind == 1:      # conditionally stable: three integrators-ish with two zeros
        w = _round(_log_uniform(rng, 0.3, 3.0))
        k = _round(w ** 3 * _log_uniform(rng, 0.05, 20.0))
        return Spec("special", f"conditional {i}",
                    ("zpk", [-w / 4, -w / 3], [0.0, 0.0, -w * 4, -w * 8], k * 32 * w),
                    [("gain", 1.0), ("lag", _round(w / 20), _round(w / 100))])
    if kind == 2:      # open-loop unstable with delay, PI
        a = _round(_log_uniform(rng, 0.05, 1.0))
        delay = _round(rng.uniform(0.05, 0.8) / a)
        kp = _round(rng.uniform(1.2, 3.0))
        return Spec("special", f"unstable delay {i}", ("zpk", [], [a], a), [
            ("pi", kp, _round(rng.uniform(5, 20) * delay))], delay=delay)
    a = _round(_log_uniform(rng, 0.1, 2.0))   # sampled unstable plant
    period = _round(rng.uniform(0.02, 0.3) / a)
    k = _round(rng.uniform(1.1, 4.0))
    return Spec("special", f"unstable sampled {i}", ("zpk", [], [a, -10 * a], 10 * a * a), [
        ("gain", k), ("lag", _round(a / 10), _round(a / 40))], sampling=(period, "zoh", 0))


GENERATORS = {"delay_lag": gen_delay_lag, "scaled": gen_scaled,
              "resonant_delay": gen_resonant, "sampled_lag": gen_sampled,
              "special": gen_special}


def generate(seed: int, per_family: int) -> list[Spec]:
    out = []
    for fi, fam in enumerate(FAMILIES):
        rng = np.random.default_rng([seed, fi])
        count = per_family if fam != "special" else max(per_family // 2, 4)
        out += [GENERATORS[fam](rng, i) for i in range(count)]
    return out


# --------------------------------------------------------------------------- reference
def _mpoly(coeffs):
    return [mp.mpf(float(c)) for c in coeffs]


def _pmul(a, b):
    out = [mp.mpf(0)] * (len(a) + len(b) - 1)
    for i, x in enumerate(a):
        for j, y in enumerate(b):
            out[i + j] += x * y
    return out


def _padd(a, b):
    n = max(len(a), len(b))
    a = [mp.mpf(0)] * (n - len(a)) + list(a)
    b = [mp.mpf(0)] * (n - len(b)) + list(b)
    return [x + y for x, y in zip(a, b, strict=True)]


def _from_roots(roots):
    out = [mp.mpf(1)]
    for r in roots:
        out = _pmul(out, [mp.mpf(1), -mp.mpf(float(r))])
    return out


def _peval(c, x):
    return mp.polyval(c, x)


def plant_polys(sp: Spec):
    if sp.plant[0] == "zpk":
        _, zeros, poles, gain = sp.plant
        return [mp.mpf(float(gain)) * c for c in _from_roots(zeros)], _from_roots(poles)
    return _mpoly(sp.plant[1]), _mpoly(sp.plant[2])


def controller_polys_s(sp: Spec):
    n, d = [mp.mpf(1)], [mp.mpf(1)]
    for st in sp.stages:
        if st[0] == "gain":
            n = [mp.mpf(st[1]) * c for c in n]
        elif st[0] == "lag":
            n, d = _pmul(n, [1, mp.mpf(st[1])]), _pmul(d, [1, mp.mpf(st[2])])
        elif st[0] == "pi":
            n = _pmul(n, [mp.mpf(st[1]), mp.mpf(st[1]) / mp.mpf(st[2])])
            d = _pmul(d, [1, 0])
    return n, d


def _circle_residue(fun, p, radius, m=64):
    """(1/2πj)∮ fun ds on |s − p| = radius, trapezoid rule (exponentially accurate)."""
    total = mp.mpc(0)
    for k in range(m):
        w = mp.expjpi(mp.mpf(2 * k) / m)
        s = p + radius * w
        total += fun(s) * radius * w
    return total / m


@dataclass
class Ref:
    stable: bool
    roots: list                 # roots known (all for rational/z; box roots for delay)
    complete: bool = True
    note: str = ""
    tf: object = None           # T(x) callable at mp precision
    y_inf: float = 1.0
    zeros: list = field(default_factory=list)   # zeros of T (finite, in the same domain)


def _dedupe(roots, tol):
    out = []
    for r in roots:
        if all(abs(r - q) > tol * max(abs(r), 1e-12) for q in out):
            out.append(r)
    return out


def ref_rational(sp: Spec) -> Ref:
    mp.mp.dps = 50
    np_, dp = plant_polys(sp)
    nc, dc = controller_polys_s(sp)
    num, den = _pmul(nc, np_), _pmul(dc, dp)
    char = _padd(den, num)
    while abs(char[0]) == 0:
        char = char[1:]
    roots = mp.polyroots(char, maxsteps=400, extraprec=400)
    stable = all(r.real < 0 for r in (mp.mpc(x) for x in roots))

    def tf(s):
        nv = _peval(num, s)
        return nv / (_peval(den, s) + nv)
    y_inf = float(mp.re(tf(mp.mpf(0)))) if abs(_peval(char, 0)) > 0 else float("nan")
    zeros = [complex(z) for z in (mp.polyroots(num, maxsteps=400, extraprec=400)
                                  if len(num) > 1 else [])]
    return Ref(stable, [complex(r) for r in roots], tf=tf, y_inf=y_inf, zeros=zeros)


# delay loops --------------------------------------------------------------------------
def _np_poly(c):
    return np.array([float(x) for x in c])


def _winding(f, corners, max_points=400_000):
    """Zeros of f inside the polygon ``corners`` (counter-clockwise), by the accumulated
    argument of f along the edges, each step refined until |Δ arg| < 0.2 rad."""
    total = 0.0
    for a, b in zip(corners, corners[1:] + corners[:1], strict=True):
        t = np.linspace(0.0, 1.0, 257)
        for _ in range(40):
            s = a + (b - a) * t
            v = f(s)
            if not np.all(np.isfinite(v)) or np.any(v == 0):
                return None
            d = np.angle(v[1:] / v[:-1])
            bad = np.flatnonzero(np.abs(d) > 0.2)
            if bad.size == 0:
                break
            if t.size + bad.size > max_points:
                return None
            t = np.sort(np.concatenate([t, 0.5 * (t[bad] + t[bad + 1])]))
        else:
            return None
        total += float(np.sum(d))
    return int(round(total / (2 * math.pi)))


def _rhp_radius(d, n, sigma=0.0, T=0.0):
    """R with |D(s)| > |N(s)|·e^{σT} for |s| ≥ R (so no root of D + N e^{−sT} with
    Re s ≥ −σ there), from coefficient bounds."""
    dd, nn = np.abs(d), np.abs(n)
    grow = math.exp(sigma * T)
    r = 1e-6
    for _ in range(400):
        deg = dd.size - 1
        lower = dd[0] * r ** deg - sum(dd[k] * r ** (deg - k) for k in range(1, dd.size))
        upper = grow * sum(nn[k] * r ** (nn.size - 1 - k) for k in range(nn.size))
        if lower > upper:
            return r
        r *= 1.25
    raise RuntimeError("no bound")


def ref_delay(sp: Spec, scale: float) -> Ref:
    mp.mp.dps = 30
    np_, dp = plant_polys(sp)
    nc, dc = controller_polys_s(sp)
    num, den = _pmul(nc, np_), _pmul(dc, dp)
    T = sp.delay
    dn, nn = _np_poly(den), _np_poly(num)
    ddn, dnn = np.polyder(dn), np.polyder(nn)

    def f(s):
        return np.polyval(dn, s) + np.polyval(nn, s) * np.exp(-s * T)

    # Right half-plane count (retarded: |D| ≤ |N| bounds the roots with Re s ≥ 0).
    R = _rhp_radius(dn, nn)
    corners = [complex(0, -R * 1.01), complex(R * 1.01, -R * 1.01),
               complex(R * 1.01, R * 1.01), complex(0, R * 1.01)]
    count_rhp = _winding(f, corners)
    # Box around the dominant region: all roots with |s| ≤ rho.
    rho = scale
    right = max(R * 1.01, rho)
    box = [complex(-rho, -max(rho, R * 1.01)), complex(right, -max(rho, R * 1.01)),
           complex(right, max(rho, R * 1.01)), complex(-rho, max(rho, R * 1.01))]
    count_box = _winding(f, box)
    found: list[complex] = []
    rng = np.random.default_rng(1)
    height = max(rho, R * 1.01)
    for attempt in range(4):
        nstart = 1500 * (attempt + 1)
        x = np.concatenate([
            -rho + (right + rho) * rng.random(nstart),
            -rho * np.logspace(-4, 0, 60).repeat(5)])
        y = np.concatenate([height * rng.random(nstart),
                            np.tile(height * np.array([0, 1e-3, 0.05, 0.3, 1.0]), 60)])
        s = x + 1j * y
        with np.errstate(all="ignore"):
            for _ in range(80):
                e = np.exp(-s * T)
                fv = np.polyval(dn, s) + np.polyval(nn, s) * e
                dv = np.polyval(ddn, s) + (np.polyval(dnn, s) - T * np.polyval(nn, s)) * e
                s = s - fv / dv
        ok = np.isfinite(s)
        s = s[ok]
        with np.errstate(all="ignore"):
            resid = np.abs(f(s)) / (np.abs(np.polyval(dn, s)) + np.abs(np.polyval(nn, s)
                                                                        * np.exp(-s * T)))
        s = s[resid < 1e-8]
        s = s[(s.real >= -rho) & (s.real <= right) & (np.abs(s.imag) <= height)]
        cand = list(s) + [np.conj(v) for v in s]
        found = _dedupe(found + cand, 1e-7)
        if count_box is not None and len(found) >= count_box:
            break

    def fm(x):
        return _peval(den, x) + _peval(num, x) * mp.exp(-x * T)
    polished = []
    for r in found:
        try:
            polished.append(complex(mp.findroot(fm, mp.mpc(r))))
        except (ValueError, ZeroDivisionError):
            polished.append(r)
    polished = _dedupe(polished, 1e-9)
    complete = count_box is not None and len(polished) == count_box
    if count_rhp is None:
        stable = all(r.real < 0 for r in polished)
        complete = False
    else:
        stable = count_rhp == 0
    found_rhp = sum(1 for r in polished if r.real > 0)
    note = "" if complete else f"box count {count_box}, found {len(polished)}"
    if count_rhp is not None and found_rhp != count_rhp:
        note += f"; rhp count {count_rhp}, found {found_rhp}"

    def tf(x):
        nv = _peval(num, x) * mp.exp(-x * T)
        return nv / (_peval(den, x) + nv)
    y_inf = float(mp.re(tf(mp.mpf(0)))) if abs(_peval(den, 0) + _peval(num, 0)) > 0 else 1.0
    zeros = [complex(z) for z in (mp.polyroots(num, maxsteps=200, extraprec=200)
                                  if len(num) > 1 else [])]
    return Ref(stable, polished, complete=complete, note=note, tf=tf, y_inf=y_inf,
               zeros=zeros)


# sampled loops ------------------------------------------------------------------------
def zoh_polys(num, den, period):
    """ZOH equivalent of num/den (distinct nonzero poles), from the partial fractions of
    G(s)/s: G_d(z) = G(0) + Σ_i Res[G(s)/s, p_i]·(z − 1)/(z − e^{p_i T})."""
    poles = mp.polyroots(den, maxsteps=400, extraprec=400)
    dder = [c * (len(den) - 1 - k) for k, c in enumerate(den[:-1])]
    g0 = _peval(num, 0) / _peval(den, 0)
    zp = [mp.exp(p * period) for p in poles]
    # Common denominator Π(z − e^{p T}); numerator G(0)·Π + Σ c_i (z − 1) Π_{j≠i}.
    dz = [mp.mpc(1)]
    for q in zp:
        dz = _pmul(dz, [1, -q])
    nz = [g0 * c for c in dz]
    for i, p in enumerate(poles):
        c = _peval(num, p) / (p * _peval(dder, p))
        part = [c, -c]
        for j, q in enumerate(zp):
            if j != i:
                part = _pmul(part, [1, -q])
        nz = _padd(nz, part)
    return [mp.re(c) for c in nz], [mp.re(c) for c in dz]


def ref_sampled(sp: Spec) -> Ref:
    mp.mp.dps = 50
    period, method, cd = sp.sampling
    np_, dp = plant_polys(sp)
    nz, dz = zoh_polys(np_, dp, mp.mpf(period))
    n, d = [mp.mpf(1)], [mp.mpf(1)]
    for st in sp.stages:
        if st[0] == "gain":
            n = [mp.mpf(st[1]) * c for c in n]
        elif st[0] == "ztf":
            n, d = _pmul(n, _mpoly(st[1])), _pmul(d, _mpoly(st[2]))
        elif st[0] == "lag":
            if method != "zoh":
                raise ValueError("lag in s needs method zoh here")
            ln, ld = zoh_polys([mp.mpf(1), mp.mpf(st[1])], [mp.mpf(1), mp.mpf(st[2])],
                               mp.mpf(period))
            n, d = _pmul(n, ln), _pmul(d, ld)
    num = _pmul(n, nz)
    den = _pmul(d, dz)
    if cd:
        den = _pmul(den, [1] + [0] * cd)
    char = _padd(den, num)
    roots = mp.polyroots(char, maxsteps=400, extraprec=400)
    stable = all(abs(r) < 1 for r in roots)

    def tf(z):
        nv = _peval(num, z)
        return nv / (_peval(den, z) + nv)
    y_inf = float(mp.re(tf(mp.mpf(1))))
    trimmed = list(num)
    while trimmed and abs(trimmed[0]) < mp.mpf(10) ** (-40) * max(abs(c) for c in num):
        trimmed = trimmed[1:]
    zeros = [complex(z) for z in (mp.polyroots(trimmed, maxsteps=400, extraprec=400)
                                  if len(trimmed) > 1 else [])]
    return Ref(stable, [complex(r) for r in roots], tf=tf, y_inf=y_inf, zeros=zeros)


def reference(sp: Spec, scale: float) -> Ref:
    if sp.sampling:
        return ref_sampled(sp)
    if sp.delay:
        return ref_delay(sp, scale)
    return ref_rational(sp)


def ref_pair(ref: Ref, pole: complex, period: float | None):
    """(nearest reference root, amplitude, tail time) for a slow pole found by loopwarden."""
    roots = np.array(ref.roots)
    j = int(np.argmin(np.abs(roots - pole)))
    p = complex(roots[j])
    others = np.delete(roots, j)
    sing = np.concatenate([others, [1.0 if period else 0.0]])
    radius = 0.25 * float(np.min(np.abs(sing - p)))
    mp.mp.dps = 40
    pm = mp.mpc(p)
    if period:
        res = _circle_residue(lambda z: ref.tf(z) / (z - 1), pm, radius)
        sigma = -math.log(abs(p)) / period
    else:
        res = _circle_residue(lambda s: ref.tf(s) / s, pm, radius)
        sigma = -p.real
    res = complex(res)
    amp = res.real if abs(p.imag) <= 1e-12 * abs(p) else 2 * abs(res)
    tol = BAND * abs(ref.y_inf)
    tail = 0.0 if abs(amp) < tol else math.log(abs(amp) / tol) / sigma
    return p, amp, tail


def ref_pairs_expected(ref: Ref, period: float | None) -> int:
    """Number of slow pairs by the stated criteria (|p − z| ≤ 0.3|p|, |Re p| < ω_dom/3,
    one zero per pole), applied to the reference roots and zeros."""
    def to_s(x):
        return complex(np.log(x)) / period if period else complex(x)
    poles = [r for r in ref.roots if r.imag >= 0 and (not period or r != 0)]
    sp = [to_s(r) for r in poles]
    keep = [i for i, s in enumerate(sp) if s.real < 0]
    sp = [sp[i] for i in keep]
    zs = [to_s(z) for z in ref.zeros if not period or abs(z) > 1e-12]
    near = {i: sorted((abs(p - z), j) for j, z in enumerate(zs)
                      if abs(p - z) <= 0.3 * abs(p) and (z.imag >= 0 or p.imag == 0))
            for i, p in enumerate(sp)}
    near = {i: v for i, v in near.items() if v}
    free = [abs(p) for i, p in enumerate(sp) if i not in near]
    wdom = min(free) if free else max((abs(p) for p in sp), default=0.0)
    slow = [i for i in near if -sp[i].real < wdom / 3]
    edges = sorted((d, i, j) for i in slow for d, j in near[i])
    up, uz, count = set(), set(), 0
    for _, i, j in edges:
        if i in up or j in uz:
            continue
        up.add(i)
        uz.add(j)
        count += 1
    return count


# --------------------------------------------------------------------------- comparison
@dataclass
class Row:
    family: str
    name: str
    verdict_ok: bool
    lw_stable: bool | None
    ref_stable: bool
    pole_err: float = 0.0
    res_err: float = 0.0
    tail_err: float = 0.0
    pairs_lw: int = 0
    pairs_ref: int = 0
    not_certified: bool = False
    error: str = ""
    boost_na: list = field(default_factory=list)
    ref_note: str = ""
    seconds: float = 0.0
    details: list = field(default_factory=list)


def _scale(sp: Spec) -> float:
    """Size of the box searched for delay-loop roots: past every controller zero, the
    crossover-ish frequency 1/T and the plant's poles."""
    np_, dp = plant_polys(sp)
    ps = [abs(complex(p)) for p in mp.polyroots(dp, maxsteps=200, extraprec=200)] \
        if len(dp) > 1 else []
    zs = [st[1] for st in sp.stages if st[0] == "lag"] + \
         [1.0 / st[2] for st in sp.stages if st[0] == "pi"]
    return 3.0 * max([*ps, *zs, 2.0 / sp.delay])


def check(sp: Spec) -> Row:
    from loopwarden.design.loader import parse_design
    from loopwarden.review_run import run_review

    t0 = time.perf_counter()
    period = sp.sampling[0] if sp.sampling else None
    try:
        ref = reference(sp, _scale(sp) if sp.delay else 0.0)
    except Exception as exc:  # noqa: BLE001 - a reference failure is reported, not fatal
        return Row(sp.family, sp.name, False, None, False, error=f"reference: {exc!r}")
    row = Row(sp.family, sp.name, True, None, ref.stable, ref_note=ref.note)
    try:
        review = run_review(parse_design(toml_text(sp), "x.toml"), "general")
    except Exception as exc:  # noqa: BLE001
        row.error = f"loopwarden: {type(exc).__name__}: {exc}"
        row.verdict_ok = False
        return row
    a = review.analyses[0]
    st = a.stability
    row.lw_stable = st.closed_loop_stable
    row.verdict_ok = st.closed_loop_stable == ref.stable
    row.not_certified = not st.certified
    if a.errors and ref.stable:      # an unstable loop has no step response: expected
        row.error = "; ".join(f"{k}: {v}" for k, v in a.errors.items())[:300]
    has_lag = any(s[0] in ("lag", "ztf") for s in sp.stages)
    if has_lag and ref.stable:       # n/a on an unstable loop is expected
        row.boost_na = [f"{f.check}: {f.message}" for f in review.findings
                        if f.check in BOOST_CHECKS and f.status.value == "n/a"]
    if ref.stable and st.closed_loop_stable and a.slow_tail is not None:
        row.pairs_lw = len(a.slow_tail.pairs)
        if ref.complete:
            row.pairs_ref = ref_pairs_expected(ref, period)
        else:
            row.pairs_ref = row.pairs_lw
        for pr in a.slow_tail.pairs:
            p, amp, tail = ref_pair(ref, complex(pr.pole), period)
            pe = abs(complex(pr.pole) - p) / abs(p)
            re_ = abs(pr.residue - amp) / abs(amp)
            lw_tail = pr.tail_time_s
            if period is not None and pr.tail_samples is not None:
                lw_tail = pr.tail_samples * period
            te = 0.0 if tail == lw_tail == 0.0 else abs(lw_tail - tail) / max(tail, 1e-300)
            row.pole_err = max(row.pole_err, pe)
            row.res_err = max(row.res_err, re_)
            row.tail_err = max(row.tail_err, te)
            row.details.append((complex(pr.pole), p, pr.residue, amp, lw_tail, tail))
    row.seconds = time.perf_counter() - t0
    return row


def _bad(r: Row) -> bool:
    return (not r.verdict_ok or r.pole_err > POLE_TOL or r.res_err > RES_TOL
            or r.tail_err > TAIL_TOL or r.pairs_lw != r.pairs_ref or r.not_certified
            or bool(r.error) or bool(r.boost_na))


def summarise(rows: list[Row], wall: float) -> str:
    head = (f"{'family':<15}{'loops':>6}{'verdict≠':>9}{'pairs≠':>7}{'pole err':>10}"
            f"{'res err':>10}{'tail err':>10}{'uncert.':>8}{'error':>6}{'boost n/a':>10}"
            f"{'ref inc.':>9}{'time s':>8}")
    out = [head, "-" * len(head)]
    for fam in FAMILIES:
        rs = [r for r in rows if r.family == fam]
        if not rs:
            continue
        out.append(
            f"{fam:<15}{len(rs):>6}{sum(not r.verdict_ok for r in rs):>9}"
            f"{sum(r.pairs_lw != r.pairs_ref for r in rs):>7}"
            f"{max(r.pole_err for r in rs):>10.2e}{max(r.res_err for r in rs):>10.2e}"
            f"{max(r.tail_err for r in rs):>10.2e}{sum(r.not_certified for r in rs):>8}"
            f"{sum(bool(r.error) for r in rs):>6}{sum(bool(r.boost_na) for r in rs):>10}"
            f"{sum(bool(r.ref_note) for r in rs):>9}{sum(r.seconds for r in rs):>8.1f}")
    out.append(f"stable/unstable by reference: {sum(r.ref_stable for r in rows)}/"
               f"{sum(not r.ref_stable for r in rows)}; slow pairs compared: "
               f"{sum(len(r.details) for r in rows)}; wall time {wall:.1f} s")
    return "\n".join(out)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--per-family", type=int, default=50)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--only", choices=FAMILIES)
    args = ap.parse_args(argv)
    specs = generate(args.seed, args.per_family)
    if args.only:
        specs = [s for s in specs if s.family == args.only]
    t0 = time.perf_counter()
    if args.workers > 1:
        from multiprocessing import get_context

        with get_context("fork").Pool(args.workers) as pool:
            rows = pool.map(check, specs, chunksize=1)
    else:
        rows = [check(s) for s in specs]
    wall = time.perf_counter() - t0
    print(summarise(rows, wall))
    bad = [(s, r) for s, r in zip(specs, rows, strict=True) if _bad(r)]
    for sp, r in bad:
        print(f"\n== {r.family} / {r.name}: lw stable {r.lw_stable}, ref {r.ref_stable}, "
              f"pairs {r.pairs_lw}/{r.pairs_ref}, errs {r.pole_err:.2e} {r.res_err:.2e} "
              f"{r.tail_err:.2e} uncert {r.not_certified}")
        for msg in (r.error, r.ref_note, *r.boost_na):
            if msg:
                print("   ", msg)
        for d in r.details:
            print("    pair lw/ref:", d)
        print("   ", toml_text(sp).replace("\n", " | "))
    return 0


if __name__ == "__main__":
    sys.exit(main())
