"""The check catalog: what each check measures on one analysed loop.

A check is a small function ``(analysis, rule, design, *, baseline) -> Measurement``
registered in :data:`CHECKS` under its name (the names are part of the JSON contract).
It only *measures*; comparing against limits, severities and waivers is
:mod:`loopwarden.ruleset.evaluate`'s job.  A check that does not apply raises
:class:`NotApplicable` with the reason; one that cannot be computed raises
:class:`loopwarden.errors.AnalysisError` — neither is ever turned into a silent pass.

``rule.limits`` seen by a check are the *effective* limits (rule set, tightened by the
design); a few checks use them to pick the worst of several candidates.

Limit keys: ``min``/``warn_min`` are lower bounds, ``max``/``warn_max`` upper bounds; a
suffix names a second quantity of the same check (``max_lower``: the gain-reduction margin,
``max_ratio``: the slow-tail settling ratio).  Each key is read once, when a check is
registered, into a :class:`~loopwarden.ruleset.model.LimitKey` (quantity, bound, level).
``Measurement.compare`` maps each limit key to the number compared with it, so a check may
compare different quantities against different keys (boost_band: the 3 dB band against
``min``, the 2× band against ``warn_min``).
"""

from __future__ import annotations

from ..report.numbers import fmt  # noqa: F401  (re-exported: batch.py imports it from here)
from .check_catalog import (  # noqa: F401  (re-exported: the old import path stays valid)
    BAND,
    CHECKS,
    ERROR_CONSTANT_UNITS,
    LOWER,
    UPPER,
    Check,
    CheckFunction,
    Details,
    Measurement,
    NotApplicable,
    Option,
    _check,
    _db,
    _deg,
    _freq,
)

# The catalog order (``CHECKS``, `loopwarden rules`, the review's findings) is the order
# these modules register their checks in: keep these imports in this order.
# isort: off
from .checks_margins import (  # noqa: F401  (re-exported: the old import path stays valid)
    _loop_delay_s,
    closed_loop_stability,
    delay_margin,
    disk_margin,
    gain_margin,
    internal_stability,
    peak_complementary,
    peak_sensitivity,
    phase_margin,
    sample_rate,
)
from .checks_tracking import (  # noqa: F401  (re-exported: the old import path stays valid)
    _ERROR_LABEL,
    _band_note,
    _step,
    crossover_band,
    error_constant,
    slow_pair_tail,
    step_overshoot,
    step_rise,
    step_settling,
    system_type,
)
from .checks_effort import (  # noqa: F401  (re-exported: the old import path stays valid)
    _effort,
    _stable_for,
    control_effort,
    disturbance_rejection,
    noise_sensitivity,
    saturated_response,
)
from .checks_slow_compensation import (  # noqa: F401  (re-exported: the old import path stays valid)
    _boosts,
    _requirement_breach,
    boost_band,
    integral_alternative,
    lag_phase_budget,
)
from .checks_regression import (  # noqa: F401  (re-exported: the old import path stays valid)
    _RELATIVE_FLOOR,
    _change_text,
    regression,
    worsening_pct,
)
# isort: on
