"""Sampled designs: the ``[sampling]`` table, z-domain stages and the loop in z.

```toml
[sampling]
period = 0.001          # s, > 0
method = "tustin"       # "zoh" | "tustin" (default) | "matched": how continuous stages
                        # become digital filters
prewarp = 50.0          # only with tustin: frequency (the file's unit) matched exactly
compute_delay = 1       # whole samples between sampling and output (default 0)

[[controller]]          # a stage written directly as a digital filter
type = "tf"
domain = "z"            # num/den in descending powers of z
num = [1.2, -1.0]
den = [1.0, -1.0]
```

The continuous stages are discretised together (their product C(s)), so Tustin and
matched equivalents equal those of the separate stages and the zero-order-hold equivalent
is the step-invariant one of the whole continuous part.  The plant, the sensor and every
transport delay are sampled exactly as the computer sees them, from the hold to the sampler
(:func:`~loopwarden.lti_discrete.sample_plant`).  The loop is
``L(z) = C(z)·P_d(z)·z^(−compute_delay)``.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from types import MappingProxyType

import numpy as np

from ..lti import Zpk
from ..lti_discrete import DISCRETISATION_METHODS, DiscreteLoop, c2d, delay_z, sample_plant
from .bounds import (
    MAX_COMPUTE_DELAY,
    MAX_PERIOD_S,
    MIN_PERIOD_S,
    check_gain,
    check_roots,
)
from .forms import Table, read_poly
from .model import Sampling, Stage
from .stages import read_stage, read_stage_name

__all__ = ["DOMAINS", "controller_blocks", "discrete_loop", "read_controller_stage",
           "read_sampling"]

DOMAINS = ("s", "z")
_KEYS = ("period", "method", "prewarp", "compute_delay")


def read_sampling(t: Table) -> Sampling:
    """Validate ``[sampling]`` into a :class:`Sampling` (prewarp converted to rad/s)."""
    t.check_keys(_KEYS, required=("period",))
    period = t.number("period", above=0.0, unit="s")
    if not MIN_PERIOD_S <= period <= MAX_PERIOD_S:
        raise t.error("period", f"expected a sample period within {MIN_PERIOD_S:g} .. "
                      f"{MAX_PERIOD_S:g} s, got {period:g} s")
    method = t.choice("method", DISCRETISATION_METHODS, default="tustin")
    prewarp = None
    if t.has("prewarp"):
        if method != "tustin":
            raise t.error("prewarp", f"prewarp applies only to method = \"tustin\", not "
                          f"\"{method}\"", "remove prewarp or use the Tustin method")
        prewarp = t.frequency("prewarp")
        nyquist = np.pi / period
        if not prewarp < nyquist:
            shown = nyquist / (2 * np.pi) if t.hz else nyquist
            raise t.error("prewarp", f"the prewarp frequency must lie below the Nyquist "
                          f"frequency {shown:.6g} {t.unit} (π/period)")
    delay = 0
    if t.has("compute_delay"):
        value = t.data["compute_delay"]
        if isinstance(value, bool) or not isinstance(value, int):
            raise t.error("compute_delay", "expected a whole number of samples, got "
                          f"{value!r}", "compute_delay counts periods, e.g. 1")
        if value < 0:
            raise t.error("compute_delay", f"expected a number ≥ 0, got {value}")
        if value > MAX_COMPUTE_DELAY:
            raise t.error("compute_delay", f"expected at most {MAX_COMPUTE_DELAY} samples, "
                          f"got {value}", "each sample of delay is a state of the loop in z")
        delay = value
    return Sampling(period_s=period, method=method, prewarp_rad_s=prewarp,
                    compute_delay_samples=delay)


def read_controller_stage(t: Table, index: int, *, sampled: bool) -> Stage:
    """One ``[[controller]]`` table, in s (the stage catalog) or in z (``domain = "z"``)."""
    title = read_stage_name(t)
    if title is not None:
        t = Table({k: v for k, v in t.data.items() if k != "name"}, t.where, t.file, t.hz)
        return dataclasses.replace(read_controller_stage(t, index, sampled=sampled),
                                   title=title)
    if "domain" not in t.data:
        return read_stage(t, index)
    domain = t.choice("domain", DOMAINS)
    rest = Table({k: v for k, v in t.data.items() if k != "domain"}, t.where, t.file, t.hz)
    if domain == "s":
        return read_stage(rest, index)
    if not sampled:
        raise t.error("domain", "a stage in z needs a sampled design",
                      "add a [sampling] table with the period, or describe the stage in s")
    kind = rest.string("type") if rest.has("type") else None
    if kind != "tf":
        raise t.error("type", f"a stage in z must be type = \"tf\", got {kind!r}",
                      "write the digital filter as num/den in descending powers of z")
    body = rest.table("tf") if rest.has("tf") else Table(
        {k: v for k, v in rest.data.items() if k != "type"}, t.where, t.file, t.hz)
    if rest.has("tf"):
        others = [k for k in rest.data if k not in ("type", "tf")]
        if others:
            raise rest.error(others[0], f"'{others[0]}' given beside 'tf = {{...}}'")
    body.check_keys(("num", "den"), required=("num", "den"))
    num = read_poly(body, "num")
    den = read_poly(body, "den")
    if num.size > den.size:
        raise body.error(None, f"not causal: numerator degree {num.size - 1} exceeds "
                         f"denominator degree {den.size - 1} (in z)",
                         "a digital filter cannot use future samples")
    try:
        with np.errstate(all="ignore"):
            model = Zpk.from_tf(num, den, label=f"{t.where} tf (z)")
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        raise body.error("den", f"cannot factor the filter ({exc})",
                         "the coefficients are too large or too badly scaled") from None
    check_roots(model.poles, file=t.file, where=body.at("den"), what="a pole", domain="z")
    check_roots(model.zeros, file=t.file, where=body.at("num"), what="a zero", domain="z")
    check_gain(model.gain, file=t.file, where=body.at("num"))
    params = MappingProxyType({"num": str([float(v) for v in num]),
                               "den": str([float(v) for v in den]), "domain": "z"})
    return Stage(index=index, type="tf", params=params, model=model, domain="z")


def controller_blocks(sampling: Sampling, models: Sequence[Zpk],
                      domains: Sequence[str]) -> list[Zpk]:
    """The digital controller's blocks in z: the continuous stages (``domains`` "s")
    discretised together, then the z-domain stages in order, then the compute delay.

    Analyses that alter or remove one stage (boost band, integral alternative) rebuild the
    controller with this, so that a changed continuous stage is discretised exactly as
    the design's own controller is.
    """
    continuous = [m for m, d in zip(models, domains, strict=True) if d == "s"]
    blocks: list[Zpk] = []
    if continuous:
        c = Zpk.constant(1.0)
        for m in continuous:
            c = c * m
        blocks.append(c2d(c, sampling.period_s, sampling.method, sampling.prewarp_rad_s))
    blocks.extend(m for m, d in zip(models, domains, strict=True) if d == "z")
    if sampling.compute_delay_samples:
        blocks.append(delay_z(sampling.compute_delay_samples))
    return blocks


def discrete_loop(sampling: Sampling, stages: Sequence[Stage], plant: Zpk,
                  sensor: Zpk | None, delay_s: float) -> DiscreteLoop:
    """The sampled-data loop of a design around one plant.

    Parameters
    ----------
    sampling : Sampling
        Period, discretisation method, prewarp and compute delay.
    stages : sequence of Stage
        The controller in signal order; s-domain stages are discretised together.
    plant, sensor : Zpk
        Continuous plant and sensor (None: unity).
    delay_s : float
        Total transport delay of plant and sensor (s), sampled exactly.
    """
    period = sampling.period_s
    blocks = controller_blocks(sampling, [st.model for st in stages],
                               [st.domain for st in stages])
    ctrl = Zpk.constant(1.0)
    for b in blocks:
        ctrl = ctrl * b

    h = sensor if sensor is not None else Zpk.constant(1.0)
    ap, bp, cp, dp = plant.to_ss()
    ah, bh, ch, dh = h.to_ss()
    n_p, n_h = ap.shape[0], ah.shape[0]
    # Plant then sensor; outputs [measured ym = H·y, plant output y].
    a = np.block([[ap, np.zeros((n_p, n_h))], [bh @ cp, ah]])
    b = np.vstack([bp, bh @ dp])
    c = np.vstack([np.hstack([dh @ cp, ch]), np.hstack([cp, np.zeros((1, n_h))])])
    d = np.vstack([dh @ dp, dp])
    sampled = sample_plant(a, b, c, d, period, delay_s,
                           poles=np.concatenate([plant.poles, h.poles]))
    pd = sampled.transfer(output=0, label="sampled plant")
    return DiscreteLoop(plant=pd, controller=ctrl, sampled=sampled, period_s=period,
                        compute_delay_samples=sampling.compute_delay_samples,
                        stages=tuple(blocks))
