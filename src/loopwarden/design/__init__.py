"""Design files: TOML → validated model objects."""

from .model import Design, PlantVariant, Requirements, Stage, Waiver

__all__ = ["Design", "PlantVariant", "Requirements", "Stage", "Waiver"]
