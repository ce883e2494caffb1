"""Regional study files: a landscape, [analyses.regional_current], [solver] and [output]; no patches."""

from __future__ import annotations

from pathlib import Path

from ..errors import ConfigError
from ..study.config import SECTIONS, Study, read_study_file
from ..study.schema import Key, Section, close_match, validate_section

__all__ = ["NAME", "SETTINGS", "is_regional_study", "load_regional_study", "DEFAULTS"]

NAME = "regional_current"

#: Defaults, chosen from the tables in docs/regional.md (benchmarks/regional_tables.py).
DEFAULTS = {"ring_nodes": 32, "tile": 1000, "margin_cells": 100, "buffer_cells": 50}


def _at_least(low):
    return lambda v: None if v >= low else f"must be {low} or more"


def _positive(value):
    return None if value > 0 else "must be greater than 0"


def _non_negative(value):
    return None if value >= 0 else "must be 0 or more"


SETTINGS = Section({
    "ring_nodes": Key(int, DEFAULTS["ring_nodes"], "source nodes spread evenly along the outer edge of each "
                                                   "window's buffer; every pair of them exchanges a unit current",
                      check=_at_least(2), unit="nodes"),
    "buffer_width": Key(float, None, "width of the ring buffer added around each window (default: "
                                     f"{DEFAULTS['buffer_cells']} cells)", check=_positive, unit="map units",
                        example=1250.0),
    "buffer_value": Key(float, None, "resistance (conductance, for a conductance landscape) of the buffer cells "
                                     "(default: the landscape's median)", check=_positive,
                        unit="as the landscape", example=10.0),
    "tile": Key(int, DEFAULTS["tile"], "cells per side of each tile's core; a landscape that fits in one tile is "
                                       "solved whole", check=_at_least(16), unit="cells"),
    "margin": Key(float, None, "width of real landscape solved around each tile's core and then dropped "
                               f"(default: {DEFAULTS['margin_cells']} cells)", check=_non_negative,
                  unit="map units", example=2500.0),
    "seed": Key(int, 1, "seed of the ring nodes' placement (where the first node sits along the ring); the same "
                        "seed gives the same map", check=_non_negative),
    "relative_to_uniform": Key(bool, True, "divide the current by the current the same ring gives on a uniform "
                                           "landscape of the buffer value: 1 = as on a uniform landscape, above 1 "
                                           "= movement funnelled, below 1 = avoided; false writes the summed "
                                           "current in A"),
}, "Current summed over all pairs of source nodes on a ring around each tile: a wall-to-wall flow map without "
   "patches, tiled for landscapes of any size.")

_TABLES = ("landscape", "analyses", "solver", "output")


def is_regional_study(path):
    """True when a study file asks for [analyses.regional_current]."""
    try:
        raw = read_study_file(path)
    except ConfigError:
        return False
    analyses = raw.get("analyses")
    return isinstance(analyses, dict) and NAME in analyses


def load_regional_study(path):
    """Read and validate a regional study file; returns a :class:`landflow.study.config.Study`.

    Raises
    ------
    ConfigError
        Naming the file and the key: unknown tables or keys, patches or other
        analyses in the same file, a suitability landscape, bad values.
    """
    path = Path(path)
    raw = read_study_file(path)
    source, base = str(path), path.resolve().parent
    for name in raw:
        if name not in _TABLES:
            hint = (" A regional study needs no patches: the ring nodes are its sources. Remove [patches]."
                    if name == "patches" else close_match(name, _TABLES))
            raise ConfigError(f"{source}: [{name}] does not belong in a regional study "
                              f"([analyses.{NAME}]).{hint} Its tables: {', '.join(_TABLES)}.")
    analyses = raw.get("analyses", {})
    others = [a for a in analyses if a != NAME]
    if others:
        raise ConfigError(f"{source}: [analyses.{NAME}] runs on its own, tiled, without patches; move "
                          f"{', '.join(f'[analyses.{a}]' for a in others)} to a study file of their own.")
    if "landscape" not in raw:
        raise ConfigError(f"{source}: the study needs a [landscape] table ({SECTIONS['landscape'].doc}).")
    settings = {}
    for name in ("landscape", "solver", "output"):
        settings[name] = validate_section(raw.get(name, {}), SECTIONS[name], name, base, source)
    land = settings["landscape"]
    if land["suitability"] is not None:
        raise ConfigError(f"{source}: 'landscape.suitability' is not read by [analyses.{NAME}]; give "
                          "'landscape.resistance' or 'landscape.conductance' (a tile reads its window straight "
                          "from that raster).")
    regional = validate_section(analyses[NAME], SETTINGS, f"analyses.{NAME}", base, source)
    return Study(path, settings, {NAME: regional})
