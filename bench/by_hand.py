"""What an engineer would script by hand with python-control and matplotlib.

The benchmark's reference for ``loopwarden review --out``: for every plant variant the
margins over all crossings, the peaks Ms and Mt, the closed-loop poles and the step response
(with its rise, settling and overshoot figures), then the same five figures the review
draws (Bode with the crossings marked, Nyquist, pole-zero map, step / step error / ramp
error, |S| and |T|) into one multi-page PDF with matplotlib's PdfPages.

It reads no loopwarden file: the loops are given as literal zeros, poles and gains in a
small JSON file, as an engineer would type them::

    python bench/by_hand.py LOOPS.json OUT.pdf

LOOPS.json: ``{"name": ..., "variants": [{"name", "zeros": [[re, im], ...], "poles":
[[re, im], ...], "gain"}]}``.  Prints the figures it computed, one line per variant.
"""

import json
import sys
from pathlib import Path

import control as ct
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.backends.backend_pdf import PdfPages  # noqa: E402


def main(src: str, out: str) -> None:
    spec = json.loads(Path(src).read_text())
    with PdfPages(out) as pdf:
        for v in spec["variants"]:
            zeros = np.array([complex(*z) for z in v["zeros"]])
            poles = np.array([complex(*p) for p in v["poles"]])
            L = ct.zpk(zeros, poles, v["gain"])
            # Margins over every crossing, and the usual summary.
            gm, pm, sm, wpc, wgc, wms = ct.stability_margins(L, returnall=True)
            gm0, pm0, wpc0, wgc0 = ct.margin(L)
            S = ct.feedback(1, L)
            T = ct.feedback(L, 1)
            cl_poles = T.poles()
            stable = bool(np.all(cl_poles.real < 0))
            # Ms and Mt on a dense grid.
            w = np.logspace(np.log10(min(abs(poles[poles != 0]).min(), 1.0)) - 2,
                            np.log10(abs(poles).max()) + 2, 5000)
            Lw = L(1j * w)
            Sw, Tw = 1 / (1 + Lw), Lw / (1 + Lw)
            ms, mt = np.abs(Sw).max(), np.abs(Tw).max()
            # Step response and its figures; ramp error from the error transfer S / s.
            t, y = ct.step_response(T)
            info = ct.step_info(T)
            _, e_ramp = ct.step_response(S * ct.tf([1], [1, 0]), T=t)
            print(v["name"], "stable" if stable else "UNSTABLE", f"GM {gm0:.4g}",
                  f"PM {pm0:.4g}", f"Ms {ms:.4g}", f"Mt {mt:.4g}",
                  f"settling {info['SettlingTime']:.4g}", f"crossings {len(wgc)}/{len(wpc)}")

            # Bode with every crossing marked.
            fig, (am, ap) = plt.subplots(2, 1, sharex=True, figsize=(6.7, 4.3))
            am.semilogx(w, 20 * np.log10(np.abs(Lw)))
            ap.semilogx(w, np.degrees(np.unwrap(np.angle(Lw))))
            am.axhline(0, ls="--", color="grey")
            ap.axhline(-180, ls="--", color="grey")
            for wc, p in zip(wgc, pm, strict=False):
                for ax in (am, ap):
                    ax.axvline(wc, ls=":", color="C1")
                ap.annotate(f"PM {p:.3g}°", (wc, -180 + p))
            for wc, g in zip(wpc, gm, strict=False):
                for ax in (am, ap):
                    ax.axvline(wc, ls=":", color="C2")
                am.annotate(f"GM {20 * np.log10(g):.3g} dB", (wc, 0))
            am.set_ylabel("magnitude (dB)")
            ap.set_ylabel("phase (deg)")
            ap.set_xlabel("frequency (rad/s)")
            am.set_title(f"Open loop — {v['name']}")
            am.grid(True, which="both")
            ap.grid(True, which="both")
            pdf.savefig(fig)
            plt.close(fig)

            # Nyquist.
            fig, ax = plt.subplots(figsize=(3.3, 3.3))
            ax.plot(Lw.real, Lw.imag)
            ax.plot(Lw.real, -Lw.imag, ls="--")
            ax.plot([-1], [0], "r+")
            th = np.linspace(0, 2 * np.pi, 200)
            ax.plot(-1 + np.cos(th) / ms, np.sin(th) / ms, ":")
            ax.set_xlim(-3, 2)
            ax.set_ylim(-2.5, 2.5)
            ax.set_title(f"Nyquist — {v['name']}")
            ax.grid(True)
            pdf.savefig(fig)
            plt.close(fig)

            # Pole-zero map of the closed loop.
            fig, ax = plt.subplots(figsize=(3.3, 3.3))
            ax.plot(cl_poles.real, cl_poles.imag, "x")
            cz = T.zeros()
            ax.plot(cz.real, cz.imag, "o", mfc="none")
            ax.axvline(0, color="grey")
            ax.set_title(f"Closed-loop poles and zeros — {v['name']}")
            ax.grid(True)
            pdf.savefig(fig)
            plt.close(fig)

            # Step, step error on a log scale, ramp error.
            fig = plt.figure(figsize=(6.7, 4.6))
            a1 = fig.add_subplot(2, 2, 1)
            a2 = fig.add_subplot(2, 2, 2)
            a3 = fig.add_subplot(2, 1, 2)
            yf = y[-1]
            a1.plot(t, y)
            a1.axhspan(0.98 * yf, 1.02 * yf, alpha=0.2)
            a1.axvline(info["SettlingTime"], ls=":")
            a1.set_title("Reference step")
            a2.semilogy(t, np.maximum(np.abs(y - yf), 1e-9))
            a2.axhline(0.02 * abs(yf), ls="--")
            a2.set_title("Step error, log scale")
            a3.plot(t, e_ramp)
            a3.set_title("Reference ramp: tracking error")
            for ax in (a1, a2, a3):
                ax.grid(True)
            fig.tight_layout()
            pdf.savefig(fig)
            plt.close(fig)

            # |S| and |T|.
            fig, ax = plt.subplots(figsize=(6.7, 3.0))
            ax.loglog(w, np.abs(Sw), label="|S|")
            ax.loglog(w, np.abs(Tw), label="|T|")
            ax.axhline(ms, ls=":")
            ax.axhline(mt, ls=":")
            ax.legend()
            ax.grid(True, which="both")
            ax.set_title(f"Sensitivity — {v['name']}")
            pdf.savefig(fig)
            plt.close(fig)


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
