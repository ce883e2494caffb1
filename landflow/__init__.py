"""landflow: connectivity of landscapes as random walks and electric circuits.

The Python API is the product's interface; the ``landflow`` command is a thin
shell over it.

>>> import landflow as lf
>>> grid = lf.Grid.from_array([[1.0, 1.0, 1.0]])
>>> graph = lf.build_graph(grid, [[1, 0, 2]])
>>> round(float(lf.effective_resistance(lf.patch_voltages(graph))[0, 1]), 9)
2.0
"""

import logging

__version__ = "0.1.0"

from .analyses.absorption import (AbsorbingWalk, StrandedWalkWarning, absorbing_walk, absorption_probability,
                                  arrival_table, expected_steps, expected_visits, hitting_probability,
                                  mortality_from_resistance, most_likely_destination, release_expected_steps)
from .analyses.current import current_density, edge_current, edge_current_density, pair_current, pair_weights
from .analyses.least_cost import LeastCost, least_cost, least_cost_table
from .analyses.priority import (connectivity, corridor, corridor_ranking, link_conductance, objective_weights,
                                restoration_gain, scenario_change)
from .analyses.regional import ring_current
from .analyses.resistance import PatchVoltages, effective_resistance, patch_voltages, resistance_table
from .analyses.simulate import WalkSample, simulate_walks
from .analyses.suitability import resistance_from_suitability
from .errors import ConfigError, InputError, LandflowError, SolverError
from .graph import CellGraph, build_graph, cell_edges, landscape_mask, network_graph
from .grid import Grid
from .solve import Solver, factorize

logging.getLogger("landflow").addHandler(logging.NullHandler())


def run_study(study):
    """Run a study file (or a validated Study); see :func:`landflow.study.run.run_study`."""
    from .study.run import run_study as _run
    return _run(study)


def check_study(study):
    """Validate a study and its inputs without solving; see :func:`landflow.study.run.check_study`."""
    from .study.run import check_study as _check
    return _check(study)


def run_regional(study, **kwargs):
    """Run a regional study (tiled flow maps without patches); see :func:`landflow.regional.run_regional`."""
    from .regional import run_regional as _run
    return _run(study, **kwargs)


def check_regional(study):
    """Validate a regional study and describe its tiling plan; see :func:`landflow.regional.check_regional`."""
    from .regional import check_regional as _check
    return _check(study)


def read_network(path, **kwargs):
    """A network from a vector line layer or a CSV edge list; see :func:`landflow.io.network.read_network`."""
    from .io.network import read_network as _read
    return _read(path, **kwargs)


def read_zones(network, **kwargs):
    """The zone of every network node, from a node column or points and polygons; see
    :func:`landflow.io.network.read_zones`."""
    from .io.network import read_zones as _read
    return _read(network, **kwargs)


def run_batch(study_files, **kwargs):
    """Run many studies and sweeps, locally or on a Dask cluster; see :func:`landflow.study.batch.run_batch`."""
    from .study.batch import run_batch as _batch
    return _batch(study_files, **kwargs)


def read_grid(path, **kwargs):
    """Read a single-band raster into a Grid; see :func:`landflow.io.rasters.read_grid`."""
    from .io.rasters import read_grid as _read
    return _read(path, **kwargs)


def read_patch_raster(path, grid):
    """Patch labels from an integer raster on ``grid``; see :func:`landflow.io.sites.read_patch_raster`."""
    from .io.sites import read_patch_raster as _read
    return _read(path, grid)


def read_patch_points(path, grid, **kwargs):
    """Patches from a CSV of points (x, y, id); see :func:`landflow.io.sites.read_patch_points`."""
    from .io.sites import read_patch_points as _read
    return _read(path, grid, **kwargs)


def read_patch_features(path, grid, **kwargs):
    """Patches from points or polygons in a vector file; see :func:`landflow.io.vectors.read_patch_features`."""
    from .io.vectors import read_patch_features as _read
    return _read(path, grid, **kwargs)


def patches_from_features(frame, grid, **kwargs):
    """Patches from a GeoDataFrame of points or polygons; see :func:`landflow.io.vectors.patches_from_features`."""
    from .io.vectors import patches_from_features as _make
    return _make(frame, grid, **kwargs)


def write_geotiff(path, array, grid, **profile):
    """Write an array on ``grid`` as a Cloud-Optimized GeoTIFF; see :func:`landflow.io.rasters.write_geotiff`."""
    from .io.rasters import write_geotiff as _write
    return _write(path, array, grid, **profile)


__all__ = [
    "__version__", "Grid", "CellGraph", "build_graph", "network_graph", "landscape_mask", "Solver", "factorize",
    "PatchVoltages", "patch_voltages", "effective_resistance", "resistance_table",
    "edge_current", "pair_current", "pair_weights", "current_density", "edge_current_density", "ring_current",
    "run_regional", "check_regional", "read_network", "read_zones",
    "AbsorbingWalk", "absorbing_walk", "hitting_probability", "absorption_probability", "most_likely_destination",
    "arrival_table", "expected_steps", "release_expected_steps", "expected_visits", "mortality_from_resistance",
    "simulate_walks", "WalkSample", "StrandedWalkWarning",
    "resistance_from_suitability",
    "run_study", "check_study", "run_batch", "read_grid", "read_patch_raster", "read_patch_points", "write_geotiff",
    "read_patch_features", "patches_from_features",
    "cell_edges", "connectivity", "link_conductance", "corridor_ranking", "corridor", "objective_weights",
    "restoration_gain", "scenario_change", "LeastCost", "least_cost", "least_cost_table",
    "LandflowError", "InputError", "ConfigError", "SolverError",
]
