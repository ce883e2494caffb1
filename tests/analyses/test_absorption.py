"""Absorbing-walk analyses: behaviour, bad input and the study steps."""

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin

import landflow as lf
from landflow.study.config import load_study
from landflow.analyses.absorption import (StrandedWalkWarning, absorbing_walk, absorption_probability,
                                          expected_steps, expected_visits, hitting_probability,
                                          mortality_from_resistance, most_likely_destination, node_crossing_time,
                                          node_source)
from landflow.analyses.simulate import simulate_walks
from landflow.errors import ConfigError, InputError


def strip(values, labels):
    return lf.build_graph(lf.Grid.from_array([values]), [labels], neighbours=4)


# -- behaviour ---------------------------------------------------------------------------------


def test_patches_in_the_middle_are_passed_through_for_a_pair():
    # 1 x 5 strip A . C . B: for "A before B" patch C does not stop the walk, so h is linear in position
    # (the voltage of a uniform wire, Doyle & Snell 1984); for "A before any other" C absorbs.
    graph = strip([1.0] * 5, [1, 0, 3, 0, 2])
    walk = absorbing_walk(graph)
    h = graph.to_raster(hitting_probability(walk, 1, 2), dtype=float)[0]
    np.testing.assert_allclose(h, [1, 0.75, 0.5, 0.25, 0], atol=1e-12)
    with pytest.warns(StrandedWalkWarning, match=r"^1 cell\(s\) cannot reach patch 1"):
        h = graph.to_raster(hitting_probability(walk, 1), dtype=float)[0]
    np.testing.assert_allclose(h, [1, 0.5, 0, 0, 0], atol=1e-12)


def test_most_likely_destination_and_death_only_piece():
    # Left piece holds patches 1 and 2; the right piece (beyond nodata) has no patch but mortality, so a walker
    # there surely dies: arrival 0, death 1, no destination.
    values = [1.0, 1.0, 1.0, 1.0, np.nan, 1.0, 1.0]
    graph = strip(values, [1, 0, 0, 2, 0, 0, 0])
    mortality = np.array([[0.0, 0.0, 0.0, 0.0, 0.0, 0.2, 0.2]])
    walk = absorbing_walk(graph, mortality)
    probability, death = absorption_probability(walk)
    best = graph.to_raster(most_likely_destination(walk), fill=-1, dtype=float)[0]
    np.testing.assert_array_equal(best, [1, 1, 2, 2, -1, 0, 0])
    np.testing.assert_allclose(graph.to_raster(death, dtype=float)[0, 5:], 1.0)
    assert np.isfinite(expected_steps(walk)).all()


def test_stranded_piece_warns_and_has_no_end():
    values = [1.0, 1.0, 1.0, np.nan, 1.0, 1.0]
    graph = strip(values, [1, 0, 2, 0, 0, 0])
    with pytest.warns(StrandedWalkWarning, match=r"^2 cell\(s\) lie in pieces of the landscape with no absorbing"):
        walk = absorbing_walk(graph)
    t = graph.to_raster(expected_steps(walk), dtype=float)[0]
    assert np.isinf(t[4:]).all() and t[1] == pytest.approx(1.0, rel=1e-12)
    probability, death = absorption_probability(walk)
    assert probability[graph.node_of_cell[0, 4]].sum() == 0 and death.sum() == 0


def test_mortality_rule_from_resistance():
    # kappa = 1 - exp(-lambda r): survival over a cell of resistance r is exp(-lambda r).
    r = np.array([[1.0, 2.0, np.nan]])
    np.testing.assert_allclose(mortality_from_resistance(r, 0.5), [[1 - np.exp(-0.5), 1 - np.exp(-1.0), 0.0]])
    with pytest.raises(InputError, match="death_per_resistance must be >= 0"):
        mortality_from_resistance(r, -1.0)


# -- bad input ---------------------------------------------------------------------------------


@pytest.mark.parametrize("bad", [1.0, -0.1, np.nan, 1.5])
def test_mortality_outside_zero_one(bad):
    graph = strip([1.0] * 4, [1, 0, 0, 2])
    mortality = np.array([[0.0, 0.1, bad, 0.0]])
    with pytest.raises(InputError, match=r"my\.tif: 1 landscape cell\(s\) have a per-step death probability "
                                         r"outside \[0, 1\) .* at row 0, col 2"):
        absorbing_walk(graph, mortality, source="my.tif")


def test_mortality_on_another_grid():
    graph = strip([1.0] * 4, [1, 0, 0, 2])
    with pytest.raises(InputError, match=r"has shape \(1, 3\) but the landscape has \(1, 4\); it must lie on the "
                                         "landscape's grid"):
        absorbing_walk(graph, np.zeros((1, 3)))


def test_unknown_patch_ids():
    walk = absorbing_walk(strip([1.0] * 4, [1, 0, 0, 2]))
    with pytest.raises(InputError, match=r"patch B: unknown patch id 7; the patches are 1, 2\."):
        hitting_probability(walk, 1, 7)
    with pytest.raises(InputError, match=r"release patch: unknown patch id 9"):
        expected_visits(walk, release_patch=9)
    with pytest.raises(InputError, match=r"absorbing patches: unknown patch id 5"):
        absorbing_walk(walk.graph, absorbing=[1, 5])
    with pytest.raises(InputError, match=r"release patch: unknown patch id 3"):
        simulate_walks(walk.graph, release_patch=3)


def test_a_equal_to_b():
    walk = absorbing_walk(strip([1.0] * 4, [1, 0, 0, 2]))
    with pytest.raises(InputError, match="patch A and patch B are both 1"):
        hitting_probability(walk, 1, 1)


def test_a_unreachable_from_part_of_the_landscape():
    # A x B y: cell y reaches A only through B. Beyond the nodata cell, u C w is another piece of the landscape.
    values = [1.0, 1.0, 1.0, 1.0, np.nan, 1.0, 1.0, 1.0]
    graph = strip(values, [1, 0, 2, 0, 0, 0, 3, 0])
    walk = absorbing_walk(graph)
    with pytest.warns(StrandedWalkWarning, match=r"^4 cell\(s\) cannot reach patch 1 without first entering patch 2"):
        h = graph.to_raster(hitting_probability(walk, 1, 2), dtype=float)[0]
    np.testing.assert_allclose(h[:4], [1, 0.5, 0, 0], atol=1e-12)
    np.testing.assert_array_equal(h[5:], 0.0)
    # with every patch absorbing, patch 3's own cell is not counted: y, u and w
    with pytest.warns(StrandedWalkWarning, match=r"^3 cell\(s\) cannot reach patch 1 without first entering any "
                                                 "other patch"):
        h = graph.to_raster(hitting_probability(walk, 1), dtype=float)[0]
    np.testing.assert_array_equal(h[[3, 5, 6, 7]], 0.0)


def test_crossing_time_with_negatives():
    graph = strip([1.0] * 4, [1, 0, 0, 2])
    with pytest.raises(InputError, match=r"t\.tif: 1 landscape cell\(s\) have a crossing time that is negative or "
                                         r"missing \(first: -2 at row 0, col 1\)"):
        node_crossing_time(graph, [[0.0, -2.0, 1.0, 1.0]], source="t.tif")


def test_release_weight_bad():
    graph = strip([1.0] * 4, [1, 0, 0, 2])
    with pytest.raises(InputError, match="release weight is 0 on every landscape cell"):
        node_source(graph, np.zeros((1, 4)))
    with pytest.raises(InputError, match=r"1 landscape cell\(s\) have a release weight that is negative"):
        node_source(graph, [[0.0, -1.0, 0.0, 0.0]])


def test_visits_from_a_patch_that_never_stops():
    values = [1.0, 1.0, np.nan, 1.0, 1.0]
    graph = strip(values, [1, 0, 0, 0, 2])
    walk = absorbing_walk(graph)
    with pytest.raises(InputError, match="walkers released from patch 1 can reach no other patch and cannot die"):
        expected_visits(walk, release_patch=1)


# -- study steps --------------------------------------------------------------------------------


def write_tif(path, array, nodata=-9999.0, cell=10.0):
    array = np.asarray(array, dtype=np.float32)
    with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                       dtype="float32", crs="EPSG:25832", transform=from_origin(500000, 5300000, cell, cell),
                       nodata=nodata) as dst:
        dst.write(np.where(np.isnan(array), nodata, array), 1)


STUDY = """
[landscape]
resistance = "resistance.tif"
[patches]
raster = "patches.tif"
[output]
folder = "out"
quicklooks = false
{extra}
[analyses.hitting_probability]
pairs = [[1, 2]]
before_any_other = [3]
[analyses.absorption_probability]
[analyses.arrival_probability]
[analyses.expected_steps]
crossing_time = "crossing.tif"
[analyses.expected_visits]
release_patches = [1]
release_raster = "source.tif"
[analyses.walk_simulation]
walkers = 200
release_patches = [1]
"""


@pytest.fixture
def study_dir(tmp_path):
    rng = np.random.default_rng(3)
    resistance = rng.uniform(1, 5, (6, 7))
    patches = np.zeros((6, 7))
    patches[0, 0] = 1
    patches[5, 6] = 2
    patches[0, 6] = 3
    write_tif(tmp_path / "resistance.tif", resistance)
    write_tif(tmp_path / "patches.tif", patches, nodata=0)
    write_tif(tmp_path / "crossing.tif", np.full((6, 7), 2.0))
    source = np.zeros((6, 7))
    source[3, 3] = 5.0
    write_tif(tmp_path / "source.tif", source)
    mortality = np.full((6, 7), 0.02)
    write_tif(tmp_path / "mortality.tif", mortality)
    return tmp_path


def run_cli(study):
    return subprocess.run([sys.executable, "-m", "landflow", "run", "-q", str(study)], capture_output=True, text=True)


@pytest.mark.parametrize("mortality", ["", '[mortality]\nraster = "mortality.tif"',
                                       "[mortality]\ndeath_per_resistance = 0.01"])
def test_study_writes_every_output(study_dir, mortality):
    study = study_dir / "study.toml"
    study.write_text(STUDY.format(extra=mortality))
    if not mortality:   # the command line once; in-process otherwise
        result = run_cli(study)
        assert result.returncode == 0, result.stderr
    else:
        lf.run_study(study)
    out = study_dir / "out"
    names = ["pair_maps/1-2/hitting_probability_1_before_2.tif", "hitting_probability_3_before_any_other.tif",
             "absorption_probability_patch_1.tif", "absorption_probability_patch_3.tif",
             "most_likely_destination.tif", "arrival_probability.csv", "expected_steps.tif", "expected_time.tif",
             "expected_steps_from_patch.csv", "expected_visits_from_patch_1.tif",
             "expected_visits_from_release_raster.tif", "walk_simulation_arrival.csv", "walk_simulation_steps.csv"]
    for name in names:
        assert (out / name).exists(), name
    assert (out / "death_probability.tif").exists() == bool(mortality)
    table = pd.read_csv(out / "arrival_probability.csv")
    np.testing.assert_allclose(table.groupby("release_patch")["probability"].sum(), 1.0, atol=1e-9)
    assert (table.loc[table.outcome == "death", "probability"] > 0).all() == bool(mortality)
    with rasterio.open(out / "expected_time.tif") as a, rasterio.open(out / "expected_steps.tif") as b:
        time, steps = a.read(1), b.read(1)
    inside = steps > 0
    np.testing.assert_allclose(time[inside], 2.0 * steps[inside], rtol=1e-5)   # uniform crossing time 2
    manifest = json.loads((out / "manifest.json").read_text())
    assert len(manifest["solvers"]) >= 2


@pytest.mark.parametrize("extra, error", [
    ('[mortality]\nraster = "bad_mortality.tif"', r"bad_mortality\.tif: 1 landscape cell\(s\) have a per-step "
                                                  r"death probability outside \[0, 1\)"),
    ('[mortality]\nraster = "small.tif"', r"small\.tif: the mortality raster is not on the grid of"),
    ('[mortality]\nraster = "mortality.tif"\ndeath_per_resistance = 0.1',
     r"\[mortality\] has both 'raster' and 'death_per_resistance'; give one of them"),
])
def test_study_bad_mortality_leaves_nothing(study_dir, extra, error):
    bad = np.full((6, 7), 0.1)
    bad[2, 4] = 1.0
    write_tif(study_dir / "bad_mortality.tif", bad)
    write_tif(study_dir / "small.tif", np.zeros((5, 7)))
    study = study_dir / "study.toml"
    study.write_text(STUDY.format(extra=extra))
    with pytest.raises((InputError, ConfigError), match=error):
        lf.run_study(study)
    assert not (study_dir / "out").exists()
    assert not list(study_dir.glob(".out*"))


def test_study_bad_requests(study_dir):
    study = study_dir / "study.toml"
    study.write_text(STUDY.format(extra="").replace("pairs = [[1, 2]]", "pairs = [[1, 1]]"))
    with pytest.raises(ConfigError, match=r"'analyses\.hitting_probability\.pairs' = \[\[1, 1\]\]: the pair "
                                          r"\[1, 1\] names the same patch twice"):
        lf.run_study(study)
    study.write_text(STUDY.format(extra="").replace("pairs = [[1, 2]]", "pairs = [[1, 8]]"))
    with pytest.raises(InputError, match=r"'analyses\.hitting_probability\.pairs' names unknown patch id\(s\) 8; "
                                         r"the patches are 1, 2, 3"):
        lf.run_study(study)
    assert not (study_dir / "out").exists()
    study.write_text(STUDY.format(extra="").replace('crossing_time = "crossing.tif"', 'crossing_time = "neg.tif"'))
    write_tif(study_dir / "neg.tif", np.full((6, 7), -1.0))
    with pytest.raises(InputError, match=r"neg\.tif: 39 landscape cell\(s\) have a crossing time that is negative"):
        lf.run_study(study)
    # 'landflow check' never solves: the crossing times are checked before any solve
    with pytest.raises(InputError, match=r"neg\.tif: 39 landscape cell\(s\) have a crossing time that is negative"):
        lf.check_study(study)


@pytest.mark.parametrize("old, new, error", [
    ("pairs = [[1, 2]]", "pairs = [[1, 8]]", r"'analyses\.hitting_probability\.pairs' names unknown patch id\(s\) 8"),
    ("before_any_other = [3]", "before_any_other = [9]",
     r"'analyses\.hitting_probability\.before_any_other' names unknown patch id\(s\) 9"),
    ("[analyses.absorption_probability]", "[analyses.absorption_probability]\npatches = [4]",
     r"'analyses\.absorption_probability\.patches' names unknown patch id\(s\) 4"),
    ("release_patches = [1]\nrelease_raster", "release_patches = [5]\nrelease_raster",
     r"'analyses\.expected_visits\.release_patches' names unknown patch id\(s\) 5"),
    ("walkers = 200\nrelease_patches = [1]", "walkers = 200\nrelease_patches = [6]",
     r"'analyses\.walk_simulation\.release_patches' names unknown patch id\(s\) 6"),
])
def test_study_unknown_patch_ids_are_found_before_solving(study_dir, old, new, error):
    # 'landflow check' never solves, so an error it raises is one found before any solve
    study = study_dir / "study.toml"
    text = STUDY.format(extra="")
    assert old in text
    study.write_text(text.replace(old, new, 1))
    with pytest.raises(InputError, match=error):
        lf.check_study(study)


def test_study_settings_errors_before_reading_inputs(study_dir):
    study = study_dir / "study.toml"
    study.write_text(STUDY.format(extra="").replace("pairs = [[1, 2]]\nbefore_any_other = [3]", ""))
    with pytest.raises(ConfigError, match=r"\[analyses\.hitting_probability\] needs 'pairs' \(such as "
                                          r"\[\[1, 2\]\]\) or 'before_any_other'"):
        load_study(study)
    study.write_text(STUDY.format(extra='[mortality]\nraster = "mortality.tif"\ndeath_per_resistance = 0.1'))
    with pytest.raises(ConfigError, match=r"\[mortality\] has both 'raster' and 'death_per_resistance'"):
        load_study(study)


def test_study_reports_unreachable_cells(study_dir):
    # a nodata column cuts off the two right-hand columns (with patches 2 and 3) from patch 1: 12 cells, less
    # patch 2 itself (it stops the walk), are counted; patch 3 is passed through, so its cell counts
    resistance = np.random.default_rng(3).uniform(1, 5, (6, 7))
    resistance[:, 4] = np.nan
    write_tif(study_dir / "resistance.tif", resistance)
    study = study_dir / "study.toml"
    study.write_text(STUDY.format(extra="").split("[analyses.absorption_probability]")[0])
    manifest = lf.run_study(study)
    assert any(w.startswith("11 cell(s) cannot reach patch 1 without first entering patch 2")
               for w in manifest["warnings"]), manifest["warnings"]
    with rasterio.open(study_dir / "out" / "pair_maps/1-2/hitting_probability_1_before_2.tif") as src:
        h = src.read(1)
    assert (h[:, 5:] == 0).all() and (h[:, :4] > 0.99).all()


@pytest.mark.parametrize("table, key", [
    ("[analyses.absorption_probability]\npatches = [1, 8]", "absorption_probability.patches"),
    ("[analyses.expected_visits]\nrelease_patches = [8]", "expected_visits.release_patches"),
    ("[analyses.walk_simulation]\nrelease_patches = [8]", "walk_simulation.release_patches"),
    ("[analyses.hitting_probability]\nbefore_any_other = [8]", "hitting_probability.before_any_other"),
])
def test_study_check_names_unknown_patch_ids_before_solving(study_dir, table, key):
    # the check (no solve) already refuses an id that is no patch, naming the key and the known ids
    study = study_dir / "study.toml"
    study.write_text(STUDY.format(extra="").split("[analyses.hitting_probability]")[0] + table + "\n")
    with pytest.raises(InputError, match=rf"'analyses\.{key}' names unknown patch id\(s\) 8; the patches are "
                                         r"1, 2, 3\. Use ids of the patch raster"):
        lf.check_study(study)


def test_simulation_inputs_are_checked_like_the_walk():
    graph = strip([1.0] * 4, [1, 0, 0, 2])
    with pytest.raises(InputError, match=r"mortality: 1 landscape cell\(s\) have a per-step death probability "
                                         r"outside \[0, 1\) \(first: 1 at row 0, col 2\)"):
        simulate_walks(graph, start_cell=(0, 1), mortality=np.array([[0.0, 0.1, 1.0, 0.0]]))
    with pytest.raises(InputError, match=r"has shape \(1, 3\) but the landscape has \(1, 4\)"):
        simulate_walks(graph, start_cell=(0, 1), crossing_time=np.ones((1, 3)))
    with pytest.raises(InputError, match=r"crossing time that is negative or missing \(first: -1 at row 0, col 1\)"):
        simulate_walks(graph, start_cell=(0, 1), crossing_time=np.array([[0.0, -1.0, 1.0, 0.0]]))
    with pytest.raises(InputError, match=r"start cell \(row 0, col 7\) is not a landscape cell .* Choose a cell"):
        simulate_walks(graph, start_cell=(0, 7))


def test_expected_visits_refuses_walks_that_never_end():
    # pieces: [patch 1, cell] | [patch 2, cell] | [cell, cell], split by nodata cells
    graph = strip([1.0, 1.0, np.nan, 1.0, 1.0, np.nan, 1.0, 1.0], [1, 0, 0, 2, 0, 0, 0, 0])
    with pytest.warns(StrandedWalkWarning):
        walk = absorbing_walk(graph)
    with pytest.raises(InputError, match=r"walkers released from patch 1 can reach no other patch and cannot die"):
        expected_visits(walk, release_patch=1)
    source = np.zeros(graph.n_nodes)
    source[graph.node_of_cell[0, 7]] = 1.0
    with pytest.raises(InputError, match=r"1 released node\(s\) lie where no walk ends"):
        expected_visits(walk, source=source)
    with pytest.raises(InputError, match=r"source must give one value per node \(6\); got shape \(3,\)"):
        expected_visits(walk, source=np.ones(3))
    with pytest.raises(InputError, match=r"needs exactly one of release_patch \(a patch id\) or source"):
        expected_visits(walk)
    with pytest.warns(StrandedWalkWarning):
        only_2 = absorbing_walk(graph, absorbing=[2])
    with pytest.raises(InputError, match=r"needs every patch absorbing; build the walk with absorbing=None"):
        expected_visits(only_2, release_patch=2)


def test_walk_simulation_table_with_unfinished_walkers(study_dir):
    # max_steps = 3 leaves most walkers unfinished; every column of the arrival table is then out of all walkers
    study = study_dir / "study.toml"
    text = STUDY.format(extra="").split("[analyses.hitting_probability]")[0]
    study.write_text(text + "[analyses.walk_simulation]\nwalkers = 400\nmax_steps = 3\nrelease_patches = [1]\n")
    manifest = lf.run_study(study)
    assert any("were still walking after 3 steps" in w for w in manifest["warnings"])
    table = pd.read_csv(study_dir / "out" / "walk_simulation_arrival.csv")
    p, sim = table["exact_probability"], table["simulated_probability"]
    np.testing.assert_allclose(table["standard_error"], np.sqrt(sim * (1 - sim) / 400))
    arrived = table["outcome"] == "arrival"
    np.testing.assert_allclose(table["difference_in_standard_errors"][arrived],
                               ((sim - p) / np.sqrt(p * (1 - p) / 400))[arrived])
