"""Reference pass fractions for tests/test_sweep.py, by independent brute force.

Box A of the test (``L = K·e^(−sT)·10(s+1)/((s+10)·s(s+2))``, K uniform on [2, 8], T uniform
on [0.02, 0.15]): 100 000 points drawn by ``numpy.random.default_rng(12345)``; at each,
``L(jω)`` from polynomial coefficients on 3 000 log-spaced frequencies in [1e−2, 1e3] rad/s;
phase margin and gain margin read by linear interpolation in ln ω (phase unwrapped from
low frequency), Ms as the largest 1/|1 + L| on the grid.  Prints the fraction of points
meeting the general rule set's hard limits: PM ≥ 45°, GM ≥ 6 dB, Ms ≤ 2 (every point of
the box has a stable closed loop: its smallest phase margin is 9.6°).

Run: ``python bench/sweep_reference.py`` (about a minute on 2 cores).  Output (2026-12-02):

    margin.phase 0.7605
    margin.gain 0.80931
    robustness.sensitivity_peak 0.69087
    smallest phase margin 9.889
"""

from __future__ import annotations

import numpy as np

N = 100_000
SEED = 12345


def figures(K: np.ndarray, T: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, ...]:
    s = 1j * w[None, :]
    num = 10.0 * K[:, None] * (s + 1.0)
    den = (s + 10.0) * s * (s + 2.0)
    L = num / den * np.exp(-s * T[:, None])
    mag = np.abs(L)
    ph = np.unwrap(np.angle(L), axis=1)
    lm = np.log(mag)
    # Phase margin at the (single) gain crossover.
    j = np.argmax(lm < 0, axis=1) - 1
    r = np.arange(K.size)
    t = -lm[r, j] / (lm[r, j + 1] - lm[r, j])
    pm = np.degrees(ph[r, j] + t * (ph[r, j + 1] - ph[r, j])) + 180.0
    # Gain margin at the first pass of the phase through −180°.
    g = ph + np.pi
    k = np.argmax(g < 0, axis=1) - 1
    t = g[r, k] / (g[r, k] - g[r, k + 1])
    gm = -20.0 / np.log(10.0) * (lm[r, k] + t * (lm[r, k + 1] - lm[r, k]))
    ms = np.max(1.0 / np.abs(1.0 + L), axis=1)
    return pm, gm, ms


def main() -> None:
    rng = np.random.default_rng(SEED)
    K = rng.uniform(2.0, 8.0, N)
    T = rng.uniform(0.02, 0.15, N)
    w = np.logspace(-2, 3, 3000)
    parts = [figures(K[i:i + 1000], T[i:i + 1000], w) for i in range(0, N, 1000)]
    pm, gm, ms = (np.concatenate([p[k] for p in parts]) for k in range(3))
    print("margin.phase", round(float(np.mean(pm >= 45.0)), 5))
    print("margin.gain", round(float(np.mean(gm >= 6.0)), 5))
    print("robustness.sensitivity_peak", round(float(np.mean(ms <= 2.0)), 5))
    print("smallest phase margin", round(float(pm.min()), 3))


if __name__ == "__main__":
    main()
