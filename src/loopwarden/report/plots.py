"""Figures for the PDF review, drawn with matplotlib (Agg, no pyplot, no global state).

Every curve and marker comes from the :class:`~loopwarden.analysis.results.LoopAnalysis`
the analysis computed; nothing here solves for a margin, a crossing or a pole.  The only
arithmetic is presentation: dB and degrees, the design's frequency unit, the pointwise
S = 1/(1 + L) and T = L/(1 + L) of the stored open-loop curve, the conjugate half of the
Nyquist curve, and the tail exponential r·e^(p·t) of a slow pair the analysis found.

Each ``*_figure`` function returns a :class:`Plot`: PNG bytes (deterministic: fixed DPI,
no metadata) with the size it is meant to be printed at.
"""

from __future__ import annotations

from .plot_frequency import (  # noqa: F401  (re-exported: the old import path stays valid)
    MARK_GM_DB,
    MAX_MARKED,
    MEASURED_MARGIN,
    _direction_arrows,
    _mark_measured_range,
    _mark_nyquist_frequency,
    _nyquist_ends,
    bode_figure,
    frequency_view,
    marked_crossings,
    nyquist_figure,
    uncovered_sides,
)
from .plot_pole_zero import (  # noqa: F401  (re-exported: the old import path stays valid)
    Z_VIEW_MAX,
    _fmt_z,
    _open_loop_map,
    _open_loop_poles,
    _pz_limits,
    _z_plane_map,
    _z_zoom,
    closed_loop_zeros,
    pole_zero_figure,
    z_plane_view,
)
from .plot_sensitivity import (  # noqa: F401  (re-exported: the old import path stays valid)
    sensitivity_figure,
)
from .plot_set import (  # noqa: F401  (re-exported: the old import path stays valid)
    _MIN_PARALLEL_FIGURES,
    _WORK,
    FIGURE_JOBS_ENV,
    MODEL_FIGURES,
    _draw_forked,
    _draw_task,
    _figure_jobs,
    _figure_keys,
    _one_plot,
    all_variant_plots,
    variant_plots,
)
from .plot_style import (  # noqa: F401  (re-exported: the old import path stays valid)
    _RC,
    _SUPERSCRIPT,
    C_BAND,
    C_FAIL,
    C_MAIN,
    C_MARK,
    C_SECOND,
    DPI,
    FULL_WIDTH_IN,
    FrequencyUnit,
    Plot,
    Raster,
    _db,
    _decade,
    _figure,
    _fmt,
    _interp_log,
    _label,
    _minor_log_grid,
    _no_data,
    _phase_deg,
    _pixels,
    _place,
    _style,
)
from .plot_time import (  # noqa: F401  (re-exported: the old import path stays valid)
    time_figure,
)
