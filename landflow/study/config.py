"""Study files: TOML in landflow's own schema, validated before any work."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import ConfigError
from ..analyses.suitability import TRANSFORMS
from ..graph import EDGE_RULES, NEIGHBOURS, VALUES_PER
from ..io.rasters import ALIGN_METHODS
from ..solve import METHODS
from .schema import REQUIRED, Key, Section, close_match, validate_section

__all__ = ["Study", "load_study", "read_study_file", "study_from_dict", "SECTIONS"]


def _positive(value):
    return None if value > 0 else "must be greater than 0"


def _above_one(value):
    return None if value > 1 else "must be greater than 1"


def _suitability_rules(land):
    if land["suitability"] is None:
        return None
    if land["suitability_transform"] == "negative_exponential" and land["suitability_shape"] is None:
        return ("suitability_transform = 'negative_exponential' needs 'suitability_shape' (the shape c > 0, "
                "for example 8)")
    if land["suitability_transform"] == "linear" and land["suitability_shape"] is not None:
        return ("'suitability_shape' only applies to suitability_transform = 'negative_exponential'; "
                "remove it or change the transform")
    return None


def _tolerance(value):
    return None if 0.0 < value < 1.0 else "must be between 0 and 1 (a relative residual, such as 1e-8)"


def _non_negative(value):
    return None if value >= 0 else "must be 0 or more"


def _patch_rules(patches):
    if patches["raster"] is not None and patches["weight_column"] is not None:
        return ("'patches.weight_column' only applies to patch points or features; with a patch raster use "
                "'patches.weight_raster'")
    if patches["features"] is None:
        for key in ("layer", "id_column", "all_touched"):
            if patches[key] not in (None, False):
                return f"'patches.{key}' only applies to 'patches.features' (a vector file); remove it"
    if patches["crs"] is not None and patches["points"] is None:
        return ("'patches.crs' gives the CRS of the CSV points' x and y; vector files and rasters carry their "
                "own CRS. Remove it")
    return None


def _mortality_rules(mortality):
    given = [k for k in ("raster", "death_per_resistance", "node_column", "edge_column") if mortality[k] is not None]
    if len(given) > 1:
        return f"has both '{given[0]}' and '{given[1]}'; give one of them"
    return None


def _network_rules(network):
    if network["crs"] is not None and network["nodes"] is None:
        return "'network.crs' gives the CRS of the node table's x and y; give 'network.nodes' or remove it"
    return None


def _zone_rules(zones):
    if zones["features"] is None:
        for key in ("layer", "id_column", "snap_distance", "weight_column"):
            if zones[key] is not None:
                return f"'zones.{key}' only applies to 'zones.features' (a vector file); remove it"
    return None


#: Inputs that may be warped onto the landscape's grid: [alignment] key -> what it aligns.
ALIGNED_INPUTS = {
    "patch_raster": "alignment of [patches] raster ('nearest' or 'mode')",
    "weight_raster": "alignment of [patches] weight_raster",
    "mortality_raster": "alignment of [mortality] raster",
    "crossing_time": "alignment of [analyses.expected_steps] crossing_time",
    "release_raster": "alignment of [analyses.expected_visits] release_raster",
    "changed_landscape": "alignment of [analyses.scenario_change] changed_landscape",
}

#: Where each aligned input's path is: [alignment] key -> (section or analysis, key).
ALIGNED_PATHS = {
    "patch_raster": ("patches", "raster"), "weight_raster": ("patches", "weight_raster"),
    "mortality_raster": ("mortality", "raster"), "crossing_time": ("expected_steps", "crossing_time"),
    "release_raster": ("expected_visits", "release_raster"),
    "changed_landscape": ("scenario_change", "changed_landscape"),
}


SECTIONS = {
    "landscape": Section({
        "resistance": Key(str, None, "raster of resistance per unit length; nodata = outside", path="input",
                          unit="resistance per map unit", example="resistance.tif"),
        "conductance": Key(str, None, "raster of conductance per unit length; 0 = barrier, nodata = outside",
                           path="input", unit="conductance x map unit", example="conductance.tif"),
        "suitability": Key(str, None, "raster of habitat suitability, turned into resistance by "
                                      "'suitability_transform'; nodata = outside", path="input",
                           unit="0 to suitability_scale", example="suitability.tif"),
        "suitability_scale": Key(float, 1.0, "suitability of a fully suitable cell: 1 for a 0-1 map, 100 for a "
                                             "0-100 map", check=_positive, unit="suitability"),
        "suitability_transform": Key(str, "linear", "linear: R = Rmax - (Rmax - 1) h; negative_exponential: "
                                                    "R = Rmax - (Rmax - 1) (1 - exp(-c h)) / (1 - exp(-c)), "
                                                    "h = suitability / suitability_scale (Keeley, Beier & "
                                                    "Gagnon 2016)", choices=TRANSFORMS),
        "suitability_shape": Key(float, None, "shape c of the negative exponential: near 0 almost linear, 8 or more "
                                              "strongly nonlinear (resistance stays low until suitability is low)",
                                 check=_positive, unit="none", example=8.0),
        "suitability_max_resistance": Key(float, 100.0, "resistance of a cell of suitability 0 (a cell of "
                                                        "suitability 1 has resistance 1)",
                                          check=_above_one, unit="resistance per map unit"),
        "neighbours": Key(int, 8, "cells joined to each cell: 8 (with diagonals) or 4", choices=NEIGHBOURS,
                          unit="cells"),
        "plain_grid_ok": Key(bool, False, "accept a landscape raster without georeferencing (no transform and "
                                          "no CRS, such as a PNG): its cells are then 1 x 1 map units"),
        "edge_rule": Key(str, "mean_resistance", "how two cells' values make an edge's conductance",
                         choices=EDGE_RULES),
        "values_per": Key(str, "length", "how the values are read: 'length' = resistance (conductance) per unit "
                                         "length of travel, so effective resistance grows with the cell size; "
                                         "'square' = resistance per square of a continuous sheet, independent "
                                         "of the cell size (docs/method.md, 'Units and resolution')",
                          choices=VALUES_PER),
    }, "The surface the walk moves over: a resistance, conductance or habitat suitability raster.",
        exactly_one=(("resistance", "conductance", "suitability"),), check=_suitability_rules),
    "patches": Section({
        "raster": Key(str, None, "integer raster of patch labels on the landscape's grid, 0 = no patch", path="input",
                      unit="label", example="patches.tif"),
        "points": Key(str, None, "CSV with columns x, y, id (map coordinates in the landscape's CRS, or in "
                                 "'crs')", path="input", unit="map units", example="sites.csv"),
        "crs": Key(str, None, "CRS of the CSV points' x and y when not the landscape's (EPSG:4326: x = longitude, "
                              "y = latitude); they are reprojected with pyproj", example="EPSG:4326"),
        "features": Key(str, None, "vector file of points or polygons (GeoPackage, GeoJSON, Shapefile, "
                                   "FlatGeobuf), reprojected to the landscape's CRS; a point marks its cell, a "
                                   "polygon the cells whose centres it holds", path="input", example="ponds.gpkg"),
        "layer": Key(str, None, "layer of 'features' to read (needed when the file has several)"),
        "id_column": Key(str, None, "column of 'features' holding each patch's id: whole numbers > 0 or text "
                                    "(default 'id'); text ids get numeric codes listed in the manifest"),
        "all_touched": Key(bool, False, "polygons of 'features' claim every cell they touch, not only cells whose "
                                        "centre they hold (for thin polygons)"),
        "weight_column": Key(str, None, "column of the points CSV or of 'features' holding each patch's weight in "
                                        "the pair sum (population size, area, quality)"),
        "weight_raster": Key(str, None, "raster summed over each patch's cells to give its weight in the pair "
                                        "sum", path="input", unit="weight per cell", example="population.tif"),
    }, "Habitat patches or sample sites.", exactly_one=(("raster", "points", "features"),), check=_patch_rules,
        renamed={"strength_column": "weight_column", "strength_raster": "weight_raster"}),
    "network": Section({
        "edges": Key(str, REQUIRED, "the network's edges: a vector file of lines (GeoPackage, Shapefile, GeoJSON, "
                                    "FlatGeobuf; each line joins its two ends) or a CSV edge list (one row per "
                                    "edge)", path="input", example="roads.gpkg"),
        "layer": Key(str, None, "layer of 'edges' to read (needed when the file has several)"),
        "nodes": Key(str, None, "CSV edge lists: a node table with 'id' (the ids the edge list uses), optional "
                                "'x' and 'y' (map coordinates) and other columns (zone ids, mortality)",
                     path="input", example="nodes.csv"),
        "from_column": Key(str, "from", "CSV edge lists: the column naming each edge's first node"),
        "to_column": Key(str, "to", "CSV edge lists: the column naming each edge's second node"),
        "resistance_column": Key(str, None, "column holding each edge's resistance (> 0), such as a travel time",
                                 example="minutes"),
        "conductance_column": Key(str, None, "column holding each edge's conductance (1 / resistance, > 0)",
                                  example="conductance"),
        "resistance_per_length_column": Key(str, None, "column holding each edge's resistance per map unit of "
                                                       "length, multiplied by the line's length (lines, or an edge "
                                                       "list with node coordinates)", example="cost_per_m"),
        "join_tolerance": Key(float, 0.0, "line ends closer than this are one node (0: only ends at exactly the "
                                          "same coordinates)", check=_non_negative, unit="map units"),
        "crs": Key(str, None, "CRS of the node table's x and y (a CSV carries none), such as 'EPSG:25832'",
                   example="EPSG:25832"),
        "one_way_column": Key(str, None, "column marking one-way links (1, -1, true or yes; 0, false, no or empty "
                                         "for two-way); a one-way link is refused unless 'symmetrise_one_way'"),
        "symmetrise_one_way": Key(bool, False, "read one-way links as two-way links of the same resistance; a link "
                                               "given one way in each direction becomes one link of the mean "
                                               "conductance of the two"),
    }, "A network instead of a raster landscape (roads, rivers, habitat links): its edges and how each edge's "
       "resistance is read. A study has either [landscape] and [patches] or [network] and [zones].",
        exactly_one=(("resistance_column", "conductance_column", "resistance_per_length_column"),),
        check=_network_rules),
    "zones": Section({
        "column": Key(str, None, "column of the node table ([network] nodes) holding each node's zone id "
                                 "(whole numbers > 0 or text; 0 or empty for none)", example="town"),
        "features": Key(str, None, "vector file of points (each snaps to the nearest node within "
                                   "'snap_distance') or polygons (every node inside), in the network's CRS; "
                                   "features with an empty or 0 id are skipped (a layer of every node works)",
                        path="input", example="towns.gpkg"),
        "layer": Key(str, None, "layer of 'features' to read (needed when the file has several)"),
        "id_column": Key(str, None, "column of 'features' holding each zone's id: whole numbers > 0 or text "
                                    "(default 'id')"),
        "snap_distance": Key(float, None, "how far a zone point may lie from its nearest node", check=_positive,
                             unit="map units", example=50.0),
        "weight_column": Key(str, None, "column of 'features' holding each zone's weight in the pair sum "
                                        "(population, size)"),
    }, "The network's zones (its patches: towns, habitat patches, sample sites); every zone's nodes are merged into "
       "one node, as a patch's cells are.", exactly_one=(("column", "features"),), check=_zone_rules),
    "mortality": Section({
        "raster": Key(str, None, "raster of per-step death probability in [0, 1) on the landscape's grid; "
                                 "nodata = 0", path="input"),
        "death_per_resistance": Key(float, None, "instead of a raster: death probability per step "
                                                 "1 - exp(-value x resistance of the cell)", check=_non_negative,
                                    unit="1 / resistance unit"),
        "node_column": Key(str, None, "network studies: column of the node table holding each node's per-step "
                                      "death probability in [0, 1)", example="death"),
        "edge_column": Key(str, None, "network studies: column of the edges holding the probability of dying "
                                      "while crossing each edge, in [0, 1)", example="death"),
    }, "Optional death of walkers on the way, used by the absorbing-walk analyses. Give at most one key; "
       "mortality on patch cells (zone nodes) is ignored. On a network, 'death_per_resistance' gives each edge "
       "the death probability 1 - exp(-value x the edge's resistance) of crossing it.", check=_mortality_rules),
    "alignment": Section({
        key: Key(str, None, doc, choices=ALIGN_METHODS) for key, doc in ALIGNED_INPUTS.items()
    }, "Inputs on another grid or CRS than the landscape are refused unless named here; each named one is warped "
       "onto the landscape's grid with rasterio.warp by the method given: 'nearest' (the source cell under each "
       "cell centre: labels, classes), 'mode' (the most common source value over the cell: labels from a finer "
       "raster) or 'mean' (area-weighted average: rates, probabilities; not counts). The manifest records each "
       "warp. The landscape raster itself is never resampled."),
    "solver": Section({
        "method": Key(str, "auto", "linear solver: auto (direct while its factor fits in memory and beats "
                                   "multigrid, else multigrid), direct (the fastest "
                                   "direct engine installed), multigrid (AMG + CG), or one direct engine: "
                                   "superlu, cholmod or pardiso (the last two from the 'fast' extra)",
                      choices=METHODS),
        "tolerance": Key(float, 1e-8, "relative residual target of iterative solves", check=_tolerance,
                         unit="relative residual"),
    }, "How the linear systems are solved."),
    "output": Section({
        "folder": Key(str, "results", "folder for the outputs, relative to the study file", path="output"),
        "quicklooks": Key(bool, True, "write PNG quick-look maps"),
        "map_layers": Key(bool, True, "write map_layers.gpkg: patches, links between them, least-cost routes and "
                                      "listed cells as vector layers for a GIS"),
    }, "Where results go."),
}


@dataclass
class Study:
    """A validated study: every setting resolved, paths absolute.

    Attributes
    ----------
    path : Path or None
        The study file.
    settings : dict
        ``{section: {key: value}}`` for the fixed sections.
    analyses : dict
        ``{analysis name: {key: value}}`` in the order landflow runs them.
    variation : dict
        For one run of a sweep, ``{dotted key: value}`` of the swept settings;
        empty otherwise.
    """

    path: Path | None
    settings: dict
    analyses: dict = field(default_factory=dict)
    variation: dict = field(default_factory=dict)

    @property
    def output_folder(self):
        return Path(self.settings["output"]["folder"]).resolve()

    def resolved(self):
        """A JSON-ready copy of every setting (paths as strings)."""
        def plain(v):
            return str(v) if isinstance(v, Path) else v
        out = {s: {k: plain(v) for k, v in keys.items()} for s, keys in self.settings.items()}
        out["analyses"] = {a: {k: plain(v) for k, v in keys.items()} for a, keys in self.analyses.items()}
        return out


def load_study(path):
    """Read and validate a study file.

    Raises
    ------
    ConfigError
        The file is missing or not TOML, or a key is unknown, mistyped, out of
        range or names a missing file. The message names the file and the key.
    """
    path = Path(path)
    raw = read_study_file(path)
    if "sweep" in raw:
        raise ConfigError(f"{path}: the study declares a [sweep], which expands into several runs; run it with "
                          f"'landflow run' or 'landflow batch', or from Python with landflow.study.sweep.expand_study.")
    if isinstance(raw.get("analyses"), dict) and "regional_current" in raw["analyses"]:
        raise ConfigError(f"{path}: the study asks for [analyses.regional_current], a regional study solved tile "
                          "by tile; run it with 'landflow run' (or 'landflow check'), or from Python with "
                          "landflow.run_regional (or landflow.check_regional).")
    return study_from_dict(raw, base_dir=path.resolve().parent, source=str(path), path=path)


def read_study_file(path):
    """Parse a study file's TOML into a dict (no validation)."""
    path = Path(path)
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"study file '{path}' does not exist.") from None
    except IsADirectoryError:
        raise ConfigError(f"'{path}' is a folder; give the path of a study file (TOML).") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}.") from None


def study_from_dict(raw, *, base_dir=".", source="study", path=None):
    """Validate an already-parsed study (a dict shaped like the TOML file)."""
    from .steps import ANALYSES

    base_dir = Path(base_dir)
    known = list(SECTIONS) + ["analyses", "sweep"]
    for name in raw:
        if name not in known:
            raise ConfigError(f"{source}: unknown table [{name}].{close_match(name, known)} "
                              f"Known tables: {', '.join(known)}.")
    if "sweep" in raw:
        raise ConfigError(f"{source}: a [sweep] table cannot be validated as one study; expand it first "
                          "(landflow.study.sweep.expand_study).")
    network = "network" in raw or "zones" in raw
    required, other = (("network", "zones"), ("landscape", "patches")) if network else \
        (("landscape", "patches"), ("network", "zones"))
    both = [f"[{name}]" for name in other if name in raw]
    if both:
        raise ConfigError(f"{source}: the study has {' and '.join(both)} as well as [{required[0]}]; a study "
                          "describes either a raster landscape ([landscape] and [patches]) or a network ([network] "
                          "and [zones]). Remove one.")
    settings = {}
    for name, section in SECTIONS.items():
        if name in other:
            continue
        table = raw.get(name, {})
        if name in required and name not in raw:
            raise ConfigError(f"{source}: the study needs a [{name}] table ({section.doc}).")
        settings[name] = validate_section(table, section, name, base_dir, source)
    _check_kind_of_study(settings, raw, network, source)
    wanted = raw.get("analyses", {})
    if not isinstance(wanted, dict) or not wanted:
        raise ConfigError(f"{source}: no analyses requested. Add a table such as [analyses.effective_resistance]; "
                          f"available: {', '.join(ANALYSES)}.")
    for name in wanted:
        if name not in ANALYSES:
            raise ConfigError(f"{source}: unknown analysis [analyses.{name}].{close_match(name, ANALYSES)} "
                              f"Available: {', '.join(ANALYSES)}.")
    analyses = {name: validate_section(wanted[name], step.SETTINGS, f"analyses.{name}", base_dir, source)
                for name, step in ANALYSES.items() if name in wanted}
    for name in analyses:
        reason = getattr(ANALYSES[name], "GRID_ONLY" if network else "NETWORK_ONLY", None)
        if reason:
            needs, this = ("a raster landscape", "network") if network else ("a network", "raster")
            raise ConfigError(f"{source}: [analyses.{name}] needs {needs}: {reason}. Remove it from this {this} "
                              "study.")
    for where, name in ALIGNED_PATHS.values() if network else ():
        if where != "scenario_change" and (analyses.get(where) or {}).get(name) is not None:
            raise ConfigError(f"{source}: 'analyses.{where}.{name}' is a raster on a landscape's grid, but this study "
                              "is a network, which has no grid. Remove it (docs/networks.md lists what networks "
                              "take).")
    for key, method in settings.get("alignment", {}).items():
        if method is None:
            continue
        where, name = ALIGNED_PATHS[key]
        table = settings.get(where, analyses.get(where)) or {}
        if table.get(name) is None:
            shown = f"[{where}]" if where in settings else f"[analyses.{where}]"
            raise ConfigError(f"{source}: 'alignment.{key}' is set but {shown} {name} is not given; remove the "
                              "alignment key or give that input.")
    if settings.get("alignment", {}).get("patch_raster") == "mean":
        raise ConfigError(f"{source}: 'alignment.patch_raster' = 'mean' would average patch labels; use 'nearest' "
                          "or 'mode'.")
    return Study(path, settings, analyses)


def _check_kind_of_study(settings, raw, network, source):
    """Keys that only apply to a raster study, or only to a network study."""
    mortality = settings["mortality"]
    if network:
        if mortality["raster"] is not None:
            raise ConfigError(f"{source}: 'mortality.raster' is a raster on a landscape's grid; on a network give "
                              "'mortality.node_column', 'mortality.edge_column' or 'mortality.death_per_resistance'.")
        if raw.get("alignment"):
            raise ConfigError(f"{source}: [alignment] warps rasters onto a landscape's grid; a network study has no "
                              "grid. Remove the [alignment] table.")
    else:
        for key in ("node_column", "edge_column"):
            if mortality[key] is not None:
                raise ConfigError(f"{source}: 'mortality.{key}' only applies to a network study; on a raster give "
                                  "'mortality.raster' or 'mortality.death_per_resistance'.")


def is_network(study):
    """True for a study of a network ([network] and [zones]), False for a raster landscape."""
    return "network" in study.settings


def aligned_inputs(study):
    """``{input path as text: alignment method}`` of a study's [alignment] table."""
    out = {}
    for key, method in study.settings.get("alignment", {}).items():
        if method is not None:
            where, name = ALIGNED_PATHS[key]
            table = study.settings.get(where, study.analyses.get(where)) or {}
            out[str(table[name])] = method
    return out
