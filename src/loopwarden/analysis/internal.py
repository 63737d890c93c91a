"""Internal stability: unstable or imaginary-axis modes cancelled between loop blocks.

A pole of one block at or right of the imaginary axis that a zero of another block in the
loop cancels (exactly or nearly) disappears from ``L = C·P·H`` but not from the loop: the
transfer from some input (a disturbance at the plant input, sensor noise) to some signal
still carries it, so the loop is not internally stable however good ``L`` looks.  The
reverse case — a right-half-plane or imaginary-axis zero of the plant cancelled by a
controller pole — is the same test seen from the other block (that controller pole is
itself unstable), and is reported the same way.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from ..lti import Zpk
from .frequency_grid import AXIS_RTOL
from .results import Cancellation, InternalStability

__all__ = ["CANCEL_RTOL", "cancellations", "internal_stability"]

#: A zero within this relative distance of a pole cancels it (|p − z| ≤ rtol·max(|p|, |z|)).
#: Covers values typed to four significant digits in two places of a design file.
CANCEL_RTOL = 1e-3


def _critical(root: complex) -> bool:
    """At or right of the imaginary axis."""
    return bool(root.real >= -AXIS_RTOL * abs(root))


def cancellations(blocks: Sequence[tuple[str, Zpk]], critical: Callable[[complex], bool],
                  rtol: float = CANCEL_RTOL) -> list[Cancellation]:
    """Pole–zero cancellations between different blocks where the pole or zero is critical.

    A zero within ``rtol`` (relative, ``|p − z| ≤ rtol·max(|p|, |z|)``) of a pole of
    another block cancels it when ``critical`` holds for either; each zero cancels at most
    one pole and each pole is cancelled at most once, nearest pairs first.  A complex pair
    is listed once, by its member with positive imaginary part; the list is nearest first.
    """
    candidates: list[tuple[float, int, int, int, int]] = []
    for i, (_, bi) in enumerate(blocks):
        poles = bi.poles
        for j, (_, bj) in enumerate(blocks):
            if i == j:
                continue
            for a, p in enumerate(poles):
                for b, z in enumerate(bj.zeros):
                    # A critical pole, or a critical zero, cancelled across two blocks.
                    if not (critical(p) or critical(z)):
                        continue
                    d = abs(p - z)
                    if d <= rtol * max(abs(p), abs(z)):
                        candidates.append((d, i, a, j, b))
    used_poles: set[tuple[int, int]] = set()
    used_zeros: set[tuple[int, int]] = set()
    found: list[Cancellation] = []
    for d, i, a, j, b in sorted(candidates):
        if (i, a) in used_poles or (j, b) in used_zeros:
            continue
        used_poles.add((i, a))
        used_zeros.add((j, b))
        p, z = complex(blocks[i][1].poles[a]), complex(blocks[j][1].zeros[b])
        if p.imag < 0 or (p.imag == 0 and z.imag < 0):
            continue
        found.append(Cancellation(pole=p, zero=z, pole_block=blocks[i][0],
                                  zero_block=blocks[j][0], distance=float(d)))
    return found


def internal_stability(blocks: Sequence[tuple[str, Zpk]], *,
                       rtol: float = CANCEL_RTOL) -> InternalStability:
    """Find unstable or imaginary-axis pole–zero cancellations between the loop's blocks.

    Parameters
    ----------
    blocks : sequence of (name, Zpk)
        The blocks in loop order (controller stages, plant, sensor).
    rtol : float
        Relative distance at which a zero cancels a pole.

    Returns
    -------
    InternalStability
        ``internally_stable`` is False when any cancellation is found.  A complex pair is
        reported once, by its member with positive imaginary part; each zero cancels at
        most one pole (the nearest first).  Cancellations inside one block are not loop
        cancellations and are left to the closed-loop eigenvalues, which keep them.
    """
    found = cancellations(blocks, _critical, rtol)
    found.sort(key=lambda c: (c.pole.real, c.pole.imag))
    if found:
        note = "; ".join(
            f"pole {_fmt(c.pole)} of {c.pole_block} cancelled by zero {_fmt(c.zero)} of "
            f"{c.zero_block}" for c in found)
    else:
        note = "no unstable or imaginary-axis pole is cancelled between blocks"
    return InternalStability(internally_stable=not found, cancellations=tuple(found),
                             note=note)


def _fmt(x: complex) -> str:
    return f"{x.real:.6g}" if x.imag == 0 else f"{x.real:.6g}{x.imag:+.6g}j"
