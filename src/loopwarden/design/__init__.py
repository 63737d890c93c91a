"""Design files: TOML → validated model objects.

:func:`load_design` reads a file, :func:`parse_design` validates text; both return a frozen
:class:`Design` with every frequency in rad/s.  The stage catalog is
:data:`loopwarden.design.stages.STAGE_TYPES`.
"""

from .loader import load_design, parse_design
from .model import Design, PlantVariant, Requirements, Stage, Waiver
from .stages import STAGE_TYPES

__all__ = ["STAGE_TYPES", "Design", "PlantVariant", "Requirements", "Stage", "Waiver",
           "load_design", "parse_design"]
