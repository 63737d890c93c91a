"""Regenerate tests/data/reference_roots.json (needs mpmath; about a minute).

    cd <worktree> && python tests/data/make_reference_roots.py

It reads the design numbers from tests/reference_loops.py and never imports loopwarden.

Every reference is computed at 50 significant digits in mpmath from the exact numbers the
design files of ``tests/reference_loops.py`` state, and cross-checked by a second method
before it is written (the script stops on any disagreement):

* rational loops: roots of the characteristic polynomial by ``mp.polyroots`` and by the
  eigenvalues of its companion matrix (``mp.eig``, a different algorithm); step residues
  Res[T(s)/s, p] = N(p)/(p·χ'(p)) and, for the slow roots, by a contour integral of
  T(s)/s on a small circle (trapezoid rule); the RHP-zero loop's instability by a sign
  change of χ on the positive real axis;
* the 400-pole cluster: Aberth iteration in complex128 on the factored form, every root
  Newton-polished in mpmath; 400 distinct roots of a degree-400 polynomial are all of them;
  stability independently by the small-gain bound |L(jω)| ≤ 0.5 < 1 [derived];
* delay loops F(s) = D(s) + N(s)e^{−sT}: Newton in mpmath from a dense set of starts; the
  number found right of Re s = −σ equals the argument-principle count on a rectangle
  enclosing every root there (bounds from coefficient estimates); each root confirmed by
  (1/2πj)∮ s F'/F ds = root and ∮ F'/F = 2πj on a small circle; residues by formula and by
  a contour integral; and y∞ + Σ r_i e^{p_i t} against the step response by numerical
  inverse Laplace transform of T(s)/s (Talbot) at t = 300 s and 1000 s;
* sampled loops: exact ZOH sampling of the plant from its partial fractions (mpmath),
  checked against scipy.signal.cont2discrete; roots by polyroots and companion
  eigenvalues; residues Res[T(z)/(z − 1), p] by formula and by contour integral.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import mpmath as mp
import numpy as np
from scipy import signal

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import reference_loops as rl  # noqa: E402

mp.mp.dps = 50
BAND = mp.mpf("0.02")


def M(x) -> mp.mpf:
    """The exact value of a double (or an mp number) in mpmath."""
    return x if isinstance(x, mp.mpf | mp.mpc) else mp.mpf(float(x))


# --------------------------------------------------------------------------- polynomials
def pmul(a, b):
    out = [mp.mpf(0)] * (len(a) + len(b) - 1)
    for i, x in enumerate(a):
        for j, y in enumerate(b):
            out[i + j] += x * y
    return out


def padd(a, b):
    n = max(len(a), len(b))
    a = [mp.mpf(0)] * (n - len(a)) + list(a)
    b = [mp.mpf(0)] * (n - len(b)) + list(b)
    return [x + y for x, y in zip(a, b, strict=True)]


def pder(a):
    n = len(a) - 1
    return [c * (n - i) for i, c in enumerate(a[:-1])]


def from_roots(roots):
    out = [mp.mpf(1)]
    for r in roots:
        out = pmul(out, [mp.mpf(1), -r])
    return out


def pval(c, x):
    return mp.polyval(c, x)


def roots_two_ways(ch):
    """Roots by polyroots and by companion eigenvalues; they must agree to 1e-40 rel."""
    a = mp.polyroots(ch, maxsteps=2000, extraprec=600)
    n = len(ch) - 1
    comp = mp.zeros(n, n)
    for j in range(n):
        comp[0, j] = -ch[j + 1] / ch[0]
    for i in range(1, n):
        comp[i, i - 1] = 1
    ev = mp.eig(comp, left=False, right=False)
    b = [mp.mpc(v) for v in ev]
    for r in a:
        d = min(abs(r - q) for q in b)
        assert d <= mp.mpf("1e-35") * max(abs(r), mp.mpf("1e-30")), (r, d)
    return [mp.mpc(r) for r in a]


def contour(fn, center, radius, n=512):
    """(1/2πj)∮ fn(s) ds on |s − center| = radius by the trapezoid rule (exponentially
    accurate for an analytic periodic integrand)."""
    total = mp.mpc(0)
    for k in range(n):
        w = mp.expjpi(mp.mpf(2 * k) / n)
        s = center + radius * w
        total += fn(s) * radius * w
    return total / n


def cplx(z) -> list[float]:
    z = mp.mpc(z)
    return [float(z.real), float(z.imag)]


def amplitude(res, pole):
    return res.real if pole.imag == 0 else 2 * abs(res)


def tail_time(amp, sigma, yinf):
    tol = BAND * abs(yinf)
    return mp.mpf(0) if abs(amp) < tol else mp.log(abs(amp) / tol) / sigma


def clean(r):
    """Snap the imaginary part of a real root to 0 and keep the upper member of a pair."""
    r = mp.mpc(r)
    if abs(r.imag) <= mp.mpf("1e-40") * max(abs(r), 1):
        r = mp.mpc(r.real, 0)
    return r


# --------------------------------------------------------------------------- rational
def rational_case(nc, dc, np_, dp, zeros, name):
    """Closed loop of C·P (unity sensor): χ = D_C·D_P + N_C·N_P, T = N_C·N_P/χ."""
    ch = padd(pmul(dc, dp), pmul(nc, np_))
    num = pmul(nc, np_)
    roots = [clean(r) for r in roots_two_ways(ch)]
    dch = pder(ch)
    yinf = pval(num, 0) / pval(ch, 0)
    stable = all(r.real < 0 for r in roots)
    out = {"name": name, "char_poly": [float(c) for c in ch],
           "char_poly_signs": [int(mp.sign(ch[0])), int(mp.sign(ch[-1]))],
           "roots": [cplx(r) for r in roots], "stable": stable,
           "rhp": sum(1 for r in roots if r.real > 0), "y_inf": float(yinf), "slow": []}
    if stable:
        free = [r for r in roots if r.imag >= 0 and
                not any(abs(r - z) <= mp.mpf("0.3") * abs(r) for z in zeros)]
        wdom = min(abs(r) for r in free)
        for z in zeros:
            cands = [r for r in roots if r.imag >= 0 and abs(r - z) <= mp.mpf("0.3") * abs(r)
                     and -r.real < wdom / 3]
            if not cands:
                continue
            p = min(cands, key=lambda r: abs(r - z))
            res = pval(num, p) / (p * pval(dch, p))
            gap = min([abs(p - q) for q in roots if q != p] + [abs(p)])
            res2 = contour(lambda s: pval(num, s) / (s * pval(ch, s)), p, gap / 10)
            assert abs(res - res2) <= mp.mpf("1e-30") * abs(res), (res, res2)
            amp = amplitude(res, p)
            out["slow"].append({"pole": cplx(p), "zero": cplx(z), "residue": float(amp),
                                "tail_time_s": float(tail_time(amp, -p.real, yinf))})
    return out


def furnace_cases():
    kc = M(rl.FURNACE_GAIN)
    zl, pl = (M(v) for v in rl.FURNACE_LAG)
    nc, dc = [kc, kc * zl], [mp.mpf(1), pl]
    dp = [M(c) for c in rl.FURNACE_DEN]
    cases = {
        "furnace_tf": rational_case(nc, dc, [M(rl.FURNACE_NUM[0])], dp, [-zl], "furnace_tf"),
        "furnace_rhp": rational_case(nc, dc, [M(c) for c in rl.FURNACE_RHP_NUM], dp,
                                     [-zl, M(rl.FURNACE_RHP_NUM[1]) / -M(rl.FURNACE_RHP_NUM[0])],
                                     "furnace_rhp"),
    }
    dpz = from_roots([-M(p) for p in rl.FURNACE_POLES])
    cases["furnace_zpk"] = rational_case(nc, dc, [mp.mpf(3e9)], dpz, [-zl], "furnace_zpk")
    zr = -M(rl.FURNACE_RHP_NUM[1]) / M(rl.FURNACE_RHP_NUM[0])
    zr = M(float(zr))                       # the design file states the zero as a double
    g = M(rl.FURNACE_RHP_NUM[0])
    cases["furnace_rhp_zpk"] = rational_case(nc, dc, [g, -g * zr], dpz, [-zl, zr],
                                             "furnace_rhp_zpk")
    assert cases["furnace_rhp_zpk"]["rhp"] == 1
    # The RHP-zero loop is unstable: χ(0) < 0 < χ(+∞) (leading coefficient 1), so χ has a
    # real root in (0, ∞): locate the sign change by bisection, independently of polyroots.
    ch = [M(c) for c in cases["furnace_rhp"]["char_poly"]]
    nc_np = pmul(nc, [M(c) for c in rl.FURNACE_RHP_NUM])
    ch = padd(pmul(dc, dp), nc_np)
    assert pval(ch, 0) < 0 < pval(ch, mp.mpf(1))
    lo, hi = mp.mpf(0), mp.mpf("1e-3")
    assert pval(ch, hi) > 0
    for _ in range(200):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if pval(ch, mid) < 0 else (lo, mid)
    cases["furnace_rhp"]["positive_real_root"] = float(lo)
    assert any(abs(complex(*r) - float(lo)) < 1e-15 for r in cases["furnace_rhp"]["roots"])
    return cases


# --------------------------------------------------------------------------- cluster
def cluster_case():
    poles = np.array(rl.CLUSTER_POLES)
    k = rl.CLUSTER_GAIN
    n = poles.size

    def f_ratio(z):                         # f/f' for f = Π(z − p) + k, in complex128
        prod = np.prod(z[:, None] - poles[None, :], axis=1)
        dlog = np.sum(1.0 / (z[:, None] - poles[None, :]), axis=1)
        return (prod + k) / (prod * dlog)

    m = np.arange(n)
    z = poles.mean() + k ** (1 / n) * np.exp(1j * (2 * m + 1) * np.pi / n) * 1.05
    for _ in range(500):                     # Aberth–Ehrlich
        ratio = f_ratio(z)
        diff = z[:, None] - z[None, :]
        np.fill_diagonal(diff, np.inf)
        corr = ratio / (1.0 - ratio * np.sum(1.0 / diff, axis=1))
        z = z - corr
        if np.max(np.abs(corr)) < 1e-15:
            break
    mpoles = [M(p) for p in rl.CLUSTER_POLES]
    mk = M(k)
    roots = []
    for z0 in z:
        s = mp.mpc(z0)
        for _ in range(8):
            prod = mp.fprod(s - p for p in mpoles)
            dlog = mp.fsum(1 / (s - p) for p in mpoles)
            step = (prod + mk) / (prod * dlog)
            s -= step
            if abs(step) < mp.mpf("1e-45"):
                break
        assert abs(mp.fprod(s - p for p in mpoles) + mk) < mp.mpf("1e-40")
        assert abs(s - z0) < 1e-9
        roots.append(s)
    gaps = min(abs(a - b) for i, a in enumerate(roots) for b in roots[i + 1:])
    assert gaps > mp.mpf("1e-4"), gaps
    # Small gain [derived]: |L(jω)| = k/Π|jω − p_i| ≤ k/Π|p_i| < 1.
    assert k / np.prod(np.abs(poles)) < 1
    re_max = max(r.real for r in roots)
    assert re_max < 0
    return {"roots": [cplx(r) for r in roots], "stable": True, "min_root_gap": float(gaps),
            "max_real_part": float(re_max)}


# --------------------------------------------------------------------------- delay
def delay_polys(case):
    if case == "dh_pi":
        kp, ti = (M(v) for v in rl.DH_PI)
        d = pmul([M(c) for c in rl.DH_DEN], [mp.mpf(1), mp.mpf(0)])
        n = [kp * M(rl.DH_NUM[0]), kp * M(rl.DH_NUM[0]) / ti]
        return d, n, M(rl.DH_DELAY), [-1 / ti]
    if case == "dh_lag":
        k, z, p = (M(v) for v in rl.DH_LAG)
        d = pmul([M(c) for c in rl.DH_DEN], [mp.mpf(1), p])
        n = [k * M(rl.DH_NUM[0]), k * M(rl.DH_NUM[0]) * z]
        return d, n, M(rl.DH_DELAY), [-z]
    if case == "resonant":
        z, p = (M(v) for v in rl.RES_LAG)
        d = pmul(pmul([M(c) for c in rl.RES_DEN], [mp.mpf(1), mp.mpf(0)]), [mp.mpf(1), p])
        n = [M(rl.RES_KI) * M(rl.RES_NUM[0]), M(rl.RES_KI) * M(rl.RES_NUM[0]) * z]
        return d, n, M(rl.RES_DELAY), [-z]
    raise KeyError(case)


def enclosing_radius(d, n, t, sigma):
    """R such that |N(s)|e^{σT} < |D(s)| for every |s| ≥ R with Re s ≥ −σ (coefficient
    bounds: |D| ≥ |d0||s|^a − Σ|d_i||s|^{a−i}, |N| ≤ Σ|n_i||s|^{b−i}); no root there."""
    dd = [float(abs(c)) for c in d]
    nn = [float(abs(c)) for c in n]
    a, b = len(dd) - 1, len(nn) - 1
    r = 1e-3
    while True:
        low = dd[0] * r ** a - sum(c * r ** (a - i) for i, c in enumerate(dd) if i)
        high = sum(c * r ** (b - i) for i, c in enumerate(nn)) * math.exp(float(sigma * t))
        if low > high and all(  # the bound only improves with r beyond this point
                dd[0] * x ** a - sum(c * x ** (a - i) for i, c in enumerate(dd) if i)
                > sum(c * x ** (b - i) for i, c in enumerate(nn)) * math.exp(float(sigma * t))
                for x in np.geomspace(r, 1e3 * r, 50)):
            return r
        r *= 1.05


def winding(fn, corners, min_pts=4000):
    """Winding number of fn (numpy, vectorised) around the polygon through ``corners``,
    with each edge sampled until every step turns the phase by less than 0.3 rad."""
    total = 0.0
    for a, b in zip(corners, corners[1:] + corners[:1], strict=True):
        npts = min_pts
        while True:
            u = np.linspace(0.0, 1.0, npts)
            vals = fn(a + (b - a) * u)
            dphi = np.angle(vals[1:] / vals[:-1])
            if np.max(np.abs(dphi)) < 0.3:
                break
            npts *= 2
        total += float(np.sum(dphi))
    w = total / (2 * math.pi)
    assert abs(w - round(w)) < 1e-6, w
    return round(w)


def delay_case(case, sigma):
    d, n, t, zeros = delay_polys(case)
    dd, dn = pder(d), pder(n)

    def F(s):
        return pval(d, s) + pval(n, s) * mp.exp(-s * t)

    def dF(s):
        return pval(dd, s) + (pval(dn, s) - t * pval(n, s)) * mp.exp(-s * t)

    dn_, nn_ = np.array([float(c) for c in d]), np.array([float(c) for c in n])
    tf = float(t)

    def Fnp(s):
        return np.polyval(dn_, s) + np.polyval(nn_, s) * np.exp(-s * tf)

    big = enclosing_radius(d, n, t, sigma)
    right = big
    corners = [complex(-sigma, -big), complex(right, -big), complex(right, big),
               complex(-sigma, big)]
    count = winding(Fnp, corners)

    # Starts: a grid over the rectangle, and the asymptotic chain e^{−sT} = −D/N.
    starts = [complex(x, y) for x in np.linspace(-float(sigma), 0.05, 40)
              for y in np.linspace(0.0, big, max(40, int(3 * big * tf / math.pi)))]
    for k in range(0, int(big * tf / (2 * math.pi)) + 3):
        s = complex(-0.5 * float(sigma), 2 * math.pi * (k + 0.5) / tf)
        for _ in range(50):
            w = -np.polyval(dn_, s) / np.polyval(nn_, s)
            s = -(np.log(w) + 2j * math.pi * k) / tf
            if abs(s) > 10 * big:
                break
        starts.append(s)
    found: list = []
    for s0 in starts:
        s = mp.mpc(s0)
        ok = False
        for _ in range(80):
            step = F(s) / dF(s)
            s -= step
            if abs(step) < mp.mpf("1e-45") * max(abs(s), 1):
                ok = True
                break
            if abs(s) > 100 * big:
                break
        if not ok or s.real <= -sigma:
            continue
        s = clean(s)
        for r in (s, mp.conj(s)):
            if all(abs(r - q) > mp.mpf("1e-20") for q in found):
                found.append(r)
    assert len(found) == count, (case, len(found), count)
    gap_to_line = min(r.real + sigma for r in found)
    assert gap_to_line > mp.mpf("1e-3") * sigma, (case, gap_to_line)

    def T_over_s(s):
        return pval(n, s) * mp.exp(-s * t) / (s * F(s))

    found.sort(key=lambda r: (-r.real, r.imag))
    yinf = pval(n, 0) / F(mp.mpf(0))
    roots = []
    for r in found:
        gap = min([abs(r - q) for q in found if q != r] + [abs(r)])
        rad = gap / 10
        one = contour(lambda s: dF(s) / F(s), r, rad)
        loc = contour(lambda s: s * dF(s) / F(s), r, rad)
        assert abs(one - 1) < mp.mpf("1e-30") and abs(loc - r) < mp.mpf("1e-30") * abs(r)
        res = pval(n, r) * mp.exp(-r * t) / (r * dF(r))
        res2 = contour(T_over_s, r, rad)
        assert abs(res - res2) < mp.mpf("1e-30") * abs(res)
        roots.append({"root": cplx(r), "residue": cplx(res)})
    # Slow pairs by the CRITERIA of analysis/slow_pairs.py, applied to the roots found.
    upper = [r for r in found if r.imag >= 0 and r.real < 0]
    near = [r for r in upper if any(abs(r - z) <= mp.mpf("0.3") * abs(r) for z in zeros)]
    wdom = min(abs(r) for r in upper if r not in near)
    slow = []
    for z in zeros:
        cands = [r for r in near if abs(r - z) <= mp.mpf("0.3") * abs(r) and -r.real < wdom / 3]
        if cands:
            p = min(cands, key=lambda r: abs(r - z))
            res = pval(n, p) * mp.exp(-p * t) / (p * dF(p))
            amp = amplitude(res, p)
            slow.append({"pole": cplx(p), "zero": cplx(z), "residue": float(amp),
                         "tail_time_s": float(tail_time(amp, -p.real, yinf))})
    # Third check, of residues and completeness at once: the step response by numerical
    # inversion of the Laplace transform T(s)/s (Talbot) equals y∞ + Σ r_i e^{p_i t} over
    # the roots found, once the roots left of the line have died out.
    checks = []
    for when in (300, 1000):
        y = mp.invertlaplace(T_over_s, when, method="talbot")
        modal = yinf + mp.fsum(mp.re(mp.mpc(*item["residue"]) * mp.exp(mp.mpc(*item["root"])
                                                                       * when))
                               for item in roots)
        assert abs(y - modal) < mp.mpf("1e-7"), (case, when, y, modal)
        checks.append([when, float(y)])
    return {"sigma": float(sigma), "rectangle_half_height": big, "argument_count": count,
            "step_by_inverse_laplace": checks,
            "roots": roots, "stable": all(r.real < 0 for r in found),
            "rhp": sum(1 for r in found if r.real > 0), "y_inf": float(yinf), "slow": slow}


# --------------------------------------------------------------------------- sampled
def zoh_exact(num, den, period):
    """Exact ZOH equivalent (num, den in z) of a strictly proper num/den with simple poles:
    P_d(z) = P(0) + Σ_i Res[P, p_i]/p_i · (z − 1)/(z − e^{p_i T})."""
    poles = [mp.mpc(p) for p in mp.polyroots(den, maxsteps=500, extraprec=300)]
    zp = [mp.exp(p * period) for p in poles]
    dd = pder(den)
    p0 = pval(num, 0) / pval(den, 0)
    dz = from_roots(zp)
    nz = [p0 * c for c in dz]
    for i, p in enumerate(poles):
        c = pval(num, p) / pval(dd, p) / p
        others = from_roots([q for j, q in enumerate(zp) if j != i])
        nz = padd(nz, [c * x for x in pmul([mp.mpf(1), mp.mpf(-1)], others)])
    nz = [mp.re(c) for c in nz]
    dz = [mp.re(c) for c in dz]
    while abs(nz[0]) < mp.mpf("1e-40"):
        nz = nz[1:]
    return nz, dz


def sampled_polys(case):
    t = M(rl.SAMPLED_PERIOD)
    npl, dpl = zoh_exact([M(c) for c in rl.SAMPLED_NUM], [M(c) for c in rl.SAMPLED_DEN], t)
    # cross-check: scipy's ZOH (matrix exponential)
    b, a, _ = signal.cont2discrete((list(rl.SAMPLED_NUM), list(rl.SAMPLED_DEN)),
                                   float(t), method="zoh")
    b = np.trim_zeros(np.ravel(b), "f")
    assert np.allclose(b / a[0], [float(c) for c in npl], rtol=1e-12, atol=1e-15)
    assert np.allclose(a / a[0], [float(c) for c in dpl], rtol=1e-12, atol=1e-15)
    if case == "sampled_z_lag":
        zq, pq = (M(v) for v in rl.SAMPLED_Z_LAG)
        k = M(rl.SAMPLED_Z_GAIN)
        return [k, -k * zq], [mp.mpf(1), -pq], npl, dpl, [zq]
    if case == "sampled_s_lag":
        k = M(rl.SAMPLED_S_GAIN)
        z, p = (M(v) for v in rl.SAMPLED_S_LAG)
        e = mp.exp(-p * t)
        # ZOH of k(s + z)/(s + p): k·z/p + k(1 − z/p)(z − 1)/(z − e^{−pT}); then z^{−1}.
        nc = padd([k * z / p * c for c in [mp.mpf(1), -e]],
                  [k * (1 - z / p) * c for c in [mp.mpf(1), mp.mpf(-1)]])
        dc = pmul([mp.mpf(1), -e], [mp.mpf(1), mp.mpf(0)])
        return nc, dc, npl, dpl, [-nc[1] / nc[0]]
    raise KeyError(case)


def sampled_case(case):
    nc, dc, npl, dpl, zeros = sampled_polys(case)
    period = M(rl.SAMPLED_PERIOD)
    num = pmul(nc, npl)
    ch = padd(pmul(dc, dpl), num)
    roots = [clean(r) for r in roots_two_ways(ch)]
    dch = pder(ch)
    yinf = pval(num, 1) / pval(ch, 1)
    out = {"num": [float(c) for c in num], "char_poly": [float(c) for c in ch],
           "roots": [], "stable": all(abs(r) < 1 for r in roots), "y_inf": float(yinf),
           "slow": []}
    for r in roots:
        res = pval(num, r) / ((r - 1) * pval(dch, r))
        gap = min([abs(r - q) for q in roots if q != r] + [abs(r - 1)])
        res2 = contour(lambda z: pval(num, z) / ((z - 1) * pval(ch, z)), r, gap / 10)
        assert abs(res - res2) < mp.mpf("1e-30") * abs(res)
        out["roots"].append({"root": cplx(r), "residue": cplx(res)})
    # The slow root: the one nearest the lag zero (in s: ln(z)/T); criteria in s terms.
    for zq in zeros:
        p = min(roots, key=lambda r: abs(r - zq))
        ps, zs = mp.log(p) / period, mp.log(zq) / period
        assert abs(ps - zs) <= mp.mpf("0.3") * abs(ps)
        res = pval(num, p) / ((p - 1) * pval(dch, p))
        amp = amplitude(res, p)
        tol = BAND * abs(yinf)
        k = mp.log(abs(amp) / tol) / -mp.log(abs(p)) if abs(amp) >= tol else mp.mpf(0)
        out["slow"].append({"pole": cplx(p), "zero": cplx(zq), "residue": float(amp),
                            "tail_samples": float(k), "tail_time_s": float(k * period),
                            "pole_s": cplx(ps)})
    return out


def main() -> None:
    data = {"about": "references for tests/test_certified_roots.py, test_delay_roots.py, "
                     "test_sampled_slow_pairs.py; made by tests/data/make_reference_roots.py "
                     "(mpmath, 50 digits) [derived]",
            "band": float(BAND)}
    data.update(furnace_cases())
    data["cluster"] = cluster_case()
    data["dh_pi"] = delay_case("dh_pi", mp.mpf("0.5"))
    data["dh_lag"] = delay_case("dh_lag", mp.mpf("0.5"))
    data["resonant"] = delay_case("resonant", mp.mpf("5"))
    for case in rl.SAMPLED_DESIGNS:
        data[case] = sampled_case(case)
    rl.DATA.write_text(json.dumps(data, indent=1) + "\n", encoding="utf-8")
    print("wrote", rl.DATA)


if __name__ == "__main__":
    main()
