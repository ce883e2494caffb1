"""Bad input: each a clear error naming the file, key or cell, and the fix; no partial output left."""

import os
import re

import numpy as np
import pandas as pd
import pytest

import landflow as lf
from landflow.io.rasters import read_aligned, read_grid
from landflow.io.sites import read_patch_points
from landflow.study.config import load_study

NODATA = -9999.0


def _resistance(tif, name="resistance.tif", bad=None):
    values = np.ones((4, 5), dtype="float32")
    values[0, 0] = NODATA
    if bad is not None:
        values[2, 3] = bad
    return read_grid(tif(name, values, nodata=NODATA), what="resistance raster")


# --- landscape values -------------------------------------------------------------------------

@pytest.mark.parametrize("bad", [0.0, -2.5])
def test_resistance_zero_or_negative(tif, bad):
    grid = _resistance(tif, bad=bad)
    with pytest.raises(lf.InputError, match=r"resistance\.tif: 1 cell\(s\) have resistance <= 0; resistance must "
                                            r"be positive \(use nodata for cells outside the landscape.*First at "
                                            r"row 2, col 3 \(x=4321035, y=3209975\)"):
        lf.build_graph(grid)


def test_resistance_nan_inside_the_landscape(tif):
    grid = _resistance(tif, bad=np.nan)
    with pytest.raises(lf.InputError, match=r"1 cell\(s\) are NaN or infinite inside the landscape; set them to "
                                            r"the nodata value \(-9999\) or give them a value\. First at row 2, col 3"):
        lf.build_graph(grid)


def test_conductance_all_zero(tif):
    values = np.zeros((4, 5), dtype="float32")
    values[0, 0] = NODATA
    grid = read_grid(tif("conductance.tif", values, nodata=NODATA))
    with pytest.raises(lf.InputError, match=r"conductance\.tif: no cell is part of the landscape: every "
                                            r"conductance value is zero\. Check the nodata value"):
        lf.build_graph(grid, kind="conductance")


def test_negative_conductance(tif):
    values = np.ones((3, 3), dtype="float32")
    values[1, 2] = -1
    with pytest.raises(lf.InputError, match=r"1 cell\(s\) have negative conductance; conductance must be >= 0 "
                                            r"\(0 is a barrier\)\. First at row 1, col 2"):
        lf.build_graph(read_grid(tif("c.tif", values)), kind="conductance")


def test_geographic_crs_is_read_in_metres_and_the_flat_degrees_option_is_gone(tif):
    grid = read_grid(tif("degrees.tif", np.ones((3, 3), dtype="float32"), crs="EPSG:4326", cell=0.01,
                         origin=(9.0, 50.0)))
    assert grid.is_geographic and 700 < grid.cell_size_metres()[0] < 720     # 0.01 degree of longitude at 50 N
    with pytest.raises(TypeError, match="allow_geographic"):
        read_grid(tif("degrees2.tif", np.ones((3, 3), dtype="float32"), crs="EPSG:4326"), allow_geographic=True)


def test_raster_with_several_bands(tmp_path):
    import rasterio
    from affine import Affine
    path = tmp_path / "two_bands.tif"
    with rasterio.open(path, "w", driver="GTiff", height=3, width=3, count=2, dtype="float32", crs="EPSG:3035",
                       transform=Affine(10, 0, 0, 0, -10, 0)) as dst:
        dst.write(np.ones((2, 3, 3), dtype="float32"))
    with pytest.raises(lf.InputError, match=r"two_bands\.tif: the resistance raster has 2 bands; landflow reads "
                                            r"single-band rasters\. Extract the band you mean"):
        read_grid(path, what="resistance raster")


def test_not_a_raster(tmp_path):
    path = tmp_path / "notes.tif"
    path.write_text("this is not a raster")
    with pytest.raises(lf.InputError, match=r"cannot read the resistance raster '.*notes\.tif'") as err:
        read_grid(path, what="resistance raster")
    assert ".." not in str(err.value)                       # GDAL's own full stop is not doubled


# --- patches --------------------------------------------------------------------------------------

def test_fewer_than_two_patches_api(tif):
    grid = _resistance(tif)
    labels = np.zeros((4, 5), dtype=int)
    labels[1, 1] = 4
    with pytest.raises(lf.InputError, match=r"at least two patches are needed for pairwise analyses; found 1\. "
                                            r"Add patches"):
        lf.patch_voltages(lf.build_graph(grid, labels))


def test_fewer_than_two_patches_in_a_study(study, tif):
    labels = np.zeros((6, 8), dtype="int32")
    labels[2, 2] = 1
    tif("one_patch.tif", labels)
    with pytest.raises(lf.InputError, match=r"one_patch\.tif: found 1 patch\(es\); pairwise analyses need at "
                                            r"least two\. Check the labels"):
        lf.run_study(study(patches='raster = "one_patch.tif"'))


def test_patch_only_on_nodata(study, tif):
    labels = np.zeros((6, 8), dtype="int32")
    labels[1, 1], labels[4, 4], labels[0, 7] = 1, 2, 3      # (0, 7) is nodata in the landscape
    tif("lost.tif", labels)
    with pytest.raises(lf.InputError, match=r"patch\(es\) 3 lie entirely on cells outside the landscape"):
        lf.check_study(study(patches='raster = "lost.tif"'))


@pytest.mark.parametrize("options, differs", [
    ({"crs": "EPSG:25832"}, r"CRS EPSG:25832 instead of EPSG:3035"),
    ({"cell": 20.0}, r"transform \(20\.0, 0\.0, 4321000\.0, 0\.0, -20\.0, 3210000\.0\) instead of \(10\.0"),
    ({"origin": (4_321_010.0, 3_210_000.0)}, r"transform .*4321010\.0.* instead of"),
    ({"shape": (4, 6)}, r"shape \(4, 6\) instead of \(4, 5\)"),
])
def test_patch_raster_on_another_grid(tif, options, differs):
    grid = _resistance(tif)
    shape = options.pop("shape", (4, 5))
    path = tif("patches.tif", np.ones(shape, dtype="int32"), **options)
    with pytest.raises(lf.InputError, match=rf"patches\.tif: the patch raster is not on the grid of .*resistance\.tif: "
                                            rf"{differs}.*Resample it onto that grid"):
        read_aligned(path, grid, what="patch raster")


def test_patch_raster_with_fractional_labels(study, tif):
    labels = np.zeros((6, 8), dtype="float32")
    labels[1, 1], labels[4, 4] = 1.0, 2.5
    tif("fractional.tif", labels)
    with pytest.raises(lf.InputError, match=r"fractional\.tif: 1 cell\(s\) are not whole non-negative numbers.*"
                                            r"First at row 4, col 4"):
        lf.check_study(study(patches='raster = "fractional.tif"'))


def test_negative_weight_raster(study, tif):
    weight = np.zeros((6, 8), dtype="float32")
    weight[1, 1] = -3.0
    tif("weight.tif", weight)
    with pytest.raises(lf.InputError, match=r"weight\.tif: weight must be >= 0; first negative at row 1, col 1"):
        lf.check_study(study(patches='raster = "patches.tif"\nweight_raster = "weight.tif"'))


def test_weight_raster_with_nan_inside_its_valid_area(study, tif):
    weight = np.zeros((6, 8), dtype="float32")
    weight[2, 3] = np.nan                                 # the raster declares -9999 as nodata, not NaN
    tif("weight.tif", weight, nodata=NODATA)
    with pytest.raises(lf.InputError, match=r"weight\.tif: weight must be >= 0; first not finite at row 2, col 3 "
                                            r".*Set cells without a weight to 0 or to the raster's nodata value"):
        lf.check_study(study(patches='raster = "patches.tif"\nweight_raster = "weight.tif"'))


def test_negative_weight_in_points(tmp_path, tif, centre):
    grid = _resistance(tif)
    path = tmp_path / "points.csv"
    pd.DataFrame([[*centre(1, 1), 1, 2.0], [*centre(2, 2), 2, -1.5]],
                 columns=["x", "y", "id", "size"]).to_csv(path, index=False)
    with pytest.raises(lf.InputError, match=r"points\.csv, line 3: 'size' is -1\.5; a patch weight must be "
                                            r"a finite number >= 0"):
        read_patch_points(path, grid, weight_column="size")


def _points(tmp_path, rows):
    path = tmp_path / "points.csv"
    pd.DataFrame(rows, columns=["x", "y", "id"]).to_csv(path, index=False)
    return path


def test_point_outside_the_raster(tmp_path, tif, centre):
    grid = _resistance(tif)
    path = _points(tmp_path, [[*centre(1, 1), 1], [4_000_000.0, 3_000_000.0, 2]])
    with pytest.raises(lf.InputError, match=r"points\.csv, line 3: point \(4e\+06, 3e\+06\) with id 2 lies outside "
                                            r"the raster .*resistance\.tif\. Check its coordinates and CRS"):
        read_patch_points(path, grid)


def test_point_on_a_nodata_cell(tmp_path, tif, centre):
    grid = _resistance(tif)
    path = _points(tmp_path, [[*centre(1, 1), 1], [*centre(0, 0), 2]])
    with pytest.raises(lf.InputError, match=r"points\.csv, line 3: point with id 2 falls on a nodata cell of "
                                            r".*resistance\.tif at row 0, col 0 .*Move it onto the landscape"):
        read_patch_points(path, grid)


def test_two_points_in_one_cell_with_different_ids(tmp_path, tif, centre):
    grid = _resistance(tif)
    x, y = centre(1, 1)
    path = _points(tmp_path, [[x, y, 1], [x + 2, y - 2, 2], [*centre(3, 3), 3]])
    with pytest.raises(lf.InputError, match=r"points with different ids \[1, 2\] fall in the same cell at "
                                            r"row 1, col 1 .*Merge them into one id or move one of them"):
        read_patch_points(path, grid)


def test_points_with_a_bad_number(tmp_path, tif, centre):
    grid = _resistance(tif)
    path = _points(tmp_path, [[*centre(1, 1), 1], [*centre(2, 2), "two"]])
    with pytest.raises(lf.InputError, match=r"points\.csv, line 3: column 'id' holds 'two', not a number"):
        read_patch_points(path, grid)


def test_points_with_a_blank_value(tmp_path, tif, centre):
    grid = _resistance(tif)
    x, y = centre(2, 2)
    path = tmp_path / "points.csv"
    path.write_text(f"x,y,id\n{centre(1, 1)[0]},{centre(1, 1)[1]},1\n{x},,2\n")
    with pytest.raises(lf.InputError, match=r"points\.csv, line 3: column 'y' holds nothing \(a blank value\), "
                                            r"not a number\. Fill it in or remove the line"):
        read_patch_points(path, grid)


def test_points_with_spaces_after_the_commas(tmp_path, tif, centre):
    grid = _resistance(tif)
    (x1, y1), (x2, y2) = centre(1, 1), centre(2, 2)
    path = tmp_path / "points.csv"
    path.write_text(f"x, y, id, size\n{x1}, {y1}, 1, 2.5\n{x2}, {y2}, 2, 1\n")
    patches = read_patch_points(path, grid, weight_column="size")
    assert patches.labels[1, 1] == 1 and patches.labels[2, 2] == 2
    assert patches.weight == {1: 2.5, 2: 1.0}


# --- missing files ------------------------------------------------------------------------------

def test_missing_raster(tmp_path):
    with pytest.raises(lf.InputError, match=r"cannot read the resistance raster '.*nothere\.tif'.*Check the path"):
        read_grid(tmp_path / "nothere.tif", what="resistance raster")


def test_missing_points_file(tmp_path, tif):
    with pytest.raises(lf.InputError, match=r"patch points file '.*nothere\.csv' does not exist\. Check the path"):
        read_patch_points(tmp_path / "nothere.csv", _resistance(tif))


def test_missing_study_file(tmp_path):
    with pytest.raises(lf.ConfigError, match=r"study file '.*nothere\.toml' does not exist"):
        load_study(tmp_path / "nothere.toml")


def test_study_names_a_missing_raster(study):
    with pytest.raises(lf.ConfigError, match=r"'landscape\.resistance' names 'nothere\.tif', which does not exist "
                                             r"\(looked for .*\)\. Paths are relative to the study file"):
        load_study(study(landscape='resistance = "nothere.tif"'))


# --- the study file -----------------------------------------------------------------------------

@pytest.mark.parametrize("landscape, extra, message", [
    ('resistance = "resistance.tif"\nneigbours = 4', "",
     r"unknown key 'neigbours' in \[landscape\]\. Did you mean 'neighbours'\? Known keys: resistance"),
    ('resistance = "resistance.tif"', '[solver]\nmethd = "direct"',
     r"unknown key 'methd' in \[solver\]\. Did you mean 'method'\?"),
    ('resistance = "resistance.tif"', '[ouput]\nfolder = "x"',
     r"unknown table \[ouput\]\. Did you mean 'output'\? Known tables"),
    ('resistance = "resistance.tif"', "[analyses.effective_resistence]",
     r"unknown analysis \[analyses\.effective_resistence\]\. Did you mean 'effective_resistance'\?"),
])
def test_unknown_key_suggests_the_close_match(study, landscape, extra, message):
    with pytest.raises(lf.ConfigError, match=r"study\.toml: " + message):
        load_study(study(landscape=landscape, extra=extra))


@pytest.mark.parametrize("landscape, extra, message", [
    ('resistance = "resistance.tif"\nneighbours = "eight"', "",
     r"'landscape\.neighbours' must be a whole number, got str 'eight'"),
    ('resistance = "resistance.tif"\nneighbours = 4.0', "", r"'landscape\.neighbours' must be a whole number, got float 4\.0"),
    ('resistance = "resistance.tif"\nneighbours = 6', "", r"'landscape\.neighbours' must be one of 4, 8; got 6"),
    ('resistance = "resistance.tif"\nedge_rule = "mean_resistence"', "",
     r"'landscape\.edge_rule' must be one of 'mean_resistance', 'mean_conductance'; got 'mean_resistence'\. "
     r"Did you mean 'mean_resistance'\?"),
    ('resistance = 3', "", r"'landscape\.resistance' must be text, got int 3"),
    ('resistance = "resistance.tif"', '[solver]\ntolerance = "small"', r"'solver\.tolerance' must be a number, got str"),
    ('resistance = "resistance.tif"', '[solver]\ntolerance = -1', r"'solver\.tolerance' = -1\.0: must be between 0 and 1"),
    ('resistance = "resistance.tif"', '[analyses.current_density.x]\n',
     r"'analyses\.current_density\.x'|unknown key 'x' in \[analyses\.current_density\]"),
    ('resistance = "resistance.tif"\nconductance = "resistance.tif"', "",
     r"\[landscape\] needs exactly one of resistance, conductance or suitability; got resistance and conductance"),
])
def test_wrong_value_types_and_values(study, landscape, extra, message):
    with pytest.raises(lf.ConfigError, match=r"study\.toml: " + message):
        load_study(study(landscape=landscape, extra=extra))


def test_wrong_types_in_output_and_analyses(study):
    with pytest.raises(lf.ConfigError, match=r"'output\.quicklooks' must be true or false, got int 1"):
        load_study(study(output="quicklooks = 1"))
    with pytest.raises(lf.ConfigError, match=r"'analyses\.current_density\.pair_current_maps' must be true or false, got str"):
        load_study(study(analyses='[analyses.current_density]\npair_current_maps = "yes"\n'))
    with pytest.raises(lf.ConfigError, match=r"no analyses requested\. Add a table such as "
                                             r"\[analyses\.effective_resistance\]"):
        load_study(study(analyses=""))


@pytest.mark.parametrize("part, text, old, new", [
    ("patches", 'raster = "patches.tif"\nstrength_raster = "patches.tif"', "strength_raster", "weight_raster"),
    ("analyses", "[analyses.current_density]\nper_pair = true", "per_pair", "pair_current_maps"),
    ("analyses", "[analyses.current_density]\nvoltage_per_pair = true", "voltage_per_pair", "pair_voltage_maps"),
    ("analyses", "[analyses.current_density]\nweight_by_strength = true", "weight_by_strength", "use_patch_weights"),
    ("analyses", "[analyses.least_cost_paths]\nper_pair = true", "per_pair", "pair_route_maps"),
])
def test_keys_of_earlier_releases_name_their_new_key(study, part, text, old, new):
    with pytest.raises(lf.ConfigError, match=rf"the key '{old}' in \[.*\] is now called '{new}'; rename it"):
        load_study(study(**{part: text}))


def test_not_toml(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[landscape\nresistance = 1\n", encoding="utf-8")
    with pytest.raises(lf.ConfigError, match=r"broken\.toml: not valid TOML: .*line 1"):
        load_study(path)


# --- output folder ------------------------------------------------------------------------------

def test_output_folder_under_a_file(study, tmp_path):
    # root may write anywhere, so make the check fail for real: the folder's parent is a file
    blocker = tmp_path / "blocker"
    blocker.write_text("not a folder")
    blocker.chmod(0o755)                      # even an executable file must not pass for a folder
    path = study(output='folder = "blocker/results"')
    with pytest.raises(lf.ConfigError, match=r"the output folder '.*blocker/results' \('output\.folder'\) cannot "
                                             r"be made: .*blocker is a file, not a folder\. Choose another folder"):
        lf.run_study(path)
    with pytest.raises(lf.ConfigError, match=r"cannot be made: .*blocker is a file"):
        lf.check_study(path)
    assert blocker.read_text() == "not a folder"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["blocker", "patches.tif", "resistance.tif", "study.toml"]


def test_output_folder_that_is_a_file(study, tmp_path):
    (tmp_path / "results").write_text("keep me")
    with pytest.raises(lf.ConfigError, match=r"the output folder '.*results' \('output\.folder'\) is an existing "
                                             r"file, not a folder"):
        lf.run_study(study())
    assert (tmp_path / "results").read_text() == "keep me"
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def _snapshot(folder):
    return {p.relative_to(folder): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def test_failed_run_leaves_no_partial_output_and_keeps_the_earlier_one(study, tmp_path, tif):
    good = study()
    manifest = lf.run_study(good)
    results = tmp_path / "results"
    assert manifest["folder"] == str(results)
    before = _snapshot(results)
    assert {"effective_resistance.csv", "current_density.tif", "manifest.json"} <= {p.name for p in before}

    # the same output folder, but the study fails after reading the inputs (only one patch)
    labels = np.zeros((6, 8), dtype="int32")
    labels[2, 2] = 1
    tif("one_patch.tif", labels)
    with pytest.raises(lf.InputError, match="found 1 patch"):
        lf.run_study(study("bad.toml", patches='raster = "one_patch.tif"'))
    assert _snapshot(results) == before
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_failed_first_run_leaves_no_output_folder(study, tmp_path, tif):
    values = np.ones((6, 8), dtype="float32")
    values[3, 3] = 0.0
    tif("zero.tif", values, nodata=NODATA)
    with pytest.raises(lf.InputError, match=r"zero\.tif: 1 cell\(s\) have resistance <= 0.*row 3, col 3"):
        lf.run_study(study(landscape='resistance = "zero.tif"'))
    assert not (tmp_path / "results").exists()
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]


# --- the command line ---------------------------------------------------------------------------

def _cases(study, tmp_path, tif):
    values = np.ones((6, 8), dtype="float32")
    values[3, 3] = -1.0
    tif("negative.tif", values, nodata=NODATA)
    (tmp_path / "blocker").write_text("x")
    return {
        "negative": (study("negative.toml", landscape='resistance = "negative.tif"'),
                     r"negative\.tif: 1 cell\(s\) have resistance <= 0"),
        "typo": (study("typo.toml", landscape='resistance = "resistance.tif"\nneigbours = 4'),
                 r"Did you mean 'neighbours'\?"),
        "blocked": (study("blocked.toml", output='folder = "blocker/out"'), r"blocker is a file, not a folder"),
        "missing": (tmp_path / "nothere.toml", r"study file '.*nothere\.toml' does not exist"),
    }


def test_cli_errors_are_one_line_without_traceback(study, tmp_path, tif, cli):
    cases = _cases(study, tmp_path, tif)
    # two real processes (interpreter start-up is slow): a study error quietly, an input error with logging
    quiet, verbose = cli(("run", "-q", cases["typo"][0]), ("run", cases["negative"][0]))
    assert quiet.returncode == 1 and quiet.stdout == ""
    assert re.fullmatch(r"landflow: error: .*" + cases["typo"][1] + r".*\n", quiet.stderr)
    assert verbose.returncode == 1 and "Traceback" not in verbose.stderr
    errors = [line for line in verbose.stderr.splitlines() if "error" in line.lower()]
    assert len(errors) == 1 and re.match(r"landflow: error: .*" + cases["negative"][1], errors[0])
    assert verbose.stderr.splitlines()[-1] == errors[0]
    assert not (tmp_path / "results").exists()
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize("case", ["negative", "typo", "blocked", "missing"])
@pytest.mark.parametrize("command", ["run", "check"])
def test_cli_main_reports_each_error_on_one_line(study, tmp_path, tif, capsys, case, command):
    from landflow.cli import main
    path, message = _cases(study, tmp_path, tif)[case]
    assert main([command, "-q", str(path)]) == 1
    out, err = capsys.readouterr()
    assert out == ""
    assert re.fullmatch(r"landflow: error: .*" + message + r".*\n", err)
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".") or p.name == "results"]


@pytest.mark.parametrize("extra, message", [
    ("[solver]\ntolerance = inf", r"'solver\.tolerance' must be a finite number, got inf"),
    ("[solver]\ntolerance = nan", r"'solver\.tolerance' must be a finite number, got nan"),
    ("[solver]\ntolerance = 1.5", r"'solver\.tolerance' = 1\.5: must be between 0 and 1"),
    ("[solver]\ntolerance = 0.0", r"'solver\.tolerance' = 0\.0: must be between 0 and 1"),
    ("[analyses.walk_simulation]\nseed = -1", r"'analyses\.walk_simulation\.seed' = -1: must be a whole number 0 "
                                              r"or more"),
])
def test_settings_are_blamed_by_their_key(study, extra, message):
    # non-finite numbers and out-of-range settings name the key, before any raster is read
    with pytest.raises(lf.ConfigError, match=r"study\.toml: " + message):
        load_study(study(extra=extra))


def test_the_api_refuses_a_tolerance_outside_zero_to_one():
    from landflow.solve import factorize
    import scipy.sparse as sp
    with pytest.raises(lf.SolverError, match=r"tolerance must be a relative residual between 0 and 1"):
        factorize(sp.identity(3, format="csr"), method="multigrid", tolerance=float("inf"))


@pytest.mark.parametrize("make, words", [
    (lambda d: "/dev/zero", "not a regular file"),
    (lambda d: (os.mkfifo(d / "pipe.tif"), "pipe.tif")[1], "not a regular file"),
    (lambda d: ((d / "folder.tif").mkdir(), "folder.tif")[1], "a folder"),
])
def test_an_input_that_is_not_a_regular_file_is_refused_without_reading_it(study, tmp_path, make, words):
    # reading a device or a pipe would block forever while the file is hashed
    name = make(tmp_path)
    with pytest.raises(lf.ConfigError, match=rf"'landscape\.resistance' names '{name}', which is {words}"):
        load_study(study(landscape=f'resistance = "{name}"'))


def test_patch_ids_above_two_to_the_53_stay_exact(study, tif):
    # through float64, 2^53 + 1 would become 2^53 and two patches would merge
    labels = np.zeros((6, 8), dtype=np.int64)
    labels[1, 1:3] = 1
    labels[4, 5:7] = 2
    big = labels.copy()
    big[big == 1] = 2 ** 53 + 1
    big[big == 2] = 2 ** 53
    tif("patches.tif", big, nodata=0, dtype="int64")
    summary = lf.check_study(study())
    assert summary["patches"] == 2
    patches = lf.read_patch_raster(study().parent / "patches.tif", lf.read_grid(study().parent / "resistance.tif"))
    assert set(patches.ids.tolist()) == {2 ** 53, 2 ** 53 + 1}


def test_a_raster_without_georeferencing_is_refused_unless_the_study_says_so(study, tmp_path):
    import rasterio
    values = np.ones((6, 8), dtype="uint8")
    with rasterio.open(tmp_path / "picture.tif", "w", driver="PNG", width=8, height=6, count=1,
                       dtype="uint8") as dst:
        dst.write(values, 1)
    with pytest.raises(lf.InputError, match=r"picture\.tif: the resistance raster has no georeferencing \(no "
                                            r"transform and no CRS; a PNG file\).*plain_grid_ok = true"):
        lf.check_study(study(landscape='resistance = "picture.tif"'))


def test_a_truncated_geotiff_names_the_file_and_the_fix(study, tmp_path):
    data = (tmp_path / "resistance.tif").read_bytes()
    (tmp_path / "cut.tif").write_bytes(data[: len(data) // 2])
    with pytest.raises(lf.InputError, match=r"cannot read the resistance raster '.*cut\.tif': .*export it again"):
        lf.check_study(study(landscape='resistance = "cut.tif"'))


def test_resistances_near_the_float32_limit_are_refused_before_the_solver(study, tif):
    path = study()
    resistance = read_grid(path.parent / "resistance.tif").values.astype("float32")
    resistance[3, 4] = 3e38
    tif("resistance.tif", resistance, nodata=NODATA)
    with pytest.raises(lf.InputError, match=r"resistance values span .* to 3e\+38, a ratio above 1e\+10 .* at "
                                            r"row 3, col 4 .*Mark impassable cells as nodata"):
        lf.check_study(path)


def test_all_zero_patch_weights_warn_naming_the_key(study, tif):
    tif("weight.tif", np.zeros((6, 8), dtype="float32"))
    summary = lf.check_study(study(patches='raster = "patches.tif"\nweight_raster = "weight.tif"'))
    assert any("every patch weight from 'patches.weight_raster' is 0" in w for w in summary["warnings"])
    ctx_warnings = lf.run_study(study(patches='raster = "patches.tif"\nweight_raster = "weight.tif"'))["warnings"]
    assert any("every patch weight from 'patches.weight_raster' is 0" in w for w in ctx_warnings)
