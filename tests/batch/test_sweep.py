"""Sweeps expand into named runs; every expansion is validated before any solve."""

import pytest

from study_fixtures import study_text, write_study
from landflow.cli import main
from landflow.errors import ConfigError
from landflow.study.config import load_study
from landflow.study.sweep import expand_study

ONLY_RESISTANCE = """
[landscape]
resistance = "resistance.tif"

[patches]
raster = "patches.tif"

[analyses.effective_resistance]
"""


def sweep_study(folder, sweep, base=None):
    return write_study(folder / "sw.toml", (base or study_text(folder="swept")) + "\n[sweep]\n" + sweep)


def test_expansion_names_folders_and_values(landscape):
    runs = expand_study(sweep_study(landscape, '"landscape.neighbours" = [4, 8]\n'
                                               'analyses.current_density.pair_current_maps = [false, true]\n'))
    assert [r.name for r in runs] == ["sw/neighbours-4_pair_current_maps-false", "sw/neighbours-4_pair_current_maps-true",
                                      "sw/neighbours-8_pair_current_maps-false", "sw/neighbours-8_pair_current_maps-true"]
    assert [r.folder for r in runs] == [landscape / "swept" / r.run_name for r in runs]
    assert runs[1].study.settings["landscape"]["neighbours"] == 4
    assert runs[1].study.analyses["current_density"]["pair_current_maps"] is True
    assert runs[2].study.variation == {"landscape.neighbours": 8, "analyses.current_density.pair_current_maps": False}


def test_a_list_of_rasters(landscape):
    (landscape / "other.tif").write_bytes((landscape / "resistance.tif").read_bytes())
    runs = expand_study(sweep_study(landscape, '"landscape.resistance" = ["resistance.tif", "other.tif"]\n'))
    assert [r.run_name for r in runs] == ["resistance-resistance", "resistance-other"]
    assert runs[1].study.settings["landscape"]["resistance"] == landscape / "other.tif"


@pytest.mark.parametrize("sweep, message", [
    ('"landscape.neighbors" = [4, 8]\n',
     r"sw.toml: \[sweep\] names an unknown setting 'landscape.neighbors'. Did you mean 'landscape.neighbours'\?"),
    ('"landscape.neighbours" = 4\n',
     r"'sweep.landscape.neighbours' must be a non-empty list of values to try, got int 4"),
    ('"landscape.neighbours" = [4, 5]\n',
     r"sw.toml \(sweep run 'neighbours-5': landscape.neighbours = 5\): 'landscape.neighbours' must be one of 4, 8; got 5"),
    ('"landscape.resistance" = ["resistance.tif", "missing.tif"]\n',
     r"sweep run 'resistance-missing'.*names 'missing.tif', which does not exist"),
    ('"output.folder" = ["a", "b"]\n', r"cannot vary 'output.folder'"),
    ('"landscape.neighbours" = [4, 4]\n', r"lists a value twice"),
    ('"landscape.neighbours" = []\n', r"'sweep\.landscape\.neighbours' must be a non-empty list of values to try, "
                                      r"got an empty list\. List the values, or remove the key from \[sweep\]"),
    ("", r"sw\.toml: \[sweep\] must be a table of setting = \[values\], for example "
         r"\"landscape\.neighbours\" = \[4, 8\]; got \{\}\."),
])
def test_bad_sweeps(landscape, sweep, message):
    with pytest.raises(ConfigError, match=message):
        expand_study(sweep_study(landscape, sweep))


def test_sweeping_an_analysis_the_study_does_not_request(landscape):
    with pytest.raises(ConfigError, match=r"varies 'analyses.current_density.pair_current_maps', but the study does not "
                                          r"request \[analyses.current_density\]"):
        expand_study(sweep_study(landscape, '"analyses.current_density.pair_current_maps" = [true]\n', ONLY_RESISTANCE))


def test_a_sweep_needs_effective_resistance(landscape):
    base = ONLY_RESISTANCE.replace("[analyses.effective_resistance]", "[analyses.current_density]")
    with pytest.raises(ConfigError, match=r"a sweep compares effective resistance .* add the table "
                                          r"\[analyses.effective_resistance\]"):
        expand_study(sweep_study(landscape, '"landscape.neighbours" = [4, 8]\n', base))


def test_single_study_loader_points_to_the_sweep_commands(landscape):
    with pytest.raises(ConfigError, match=r"declares a \[sweep\].*'landflow run' or 'landflow batch'"):
        load_study(sweep_study(landscape, '"landscape.neighbours" = [4, 8]\n'))


def test_check_validates_every_run(landscape, capsys):
    assert main(["check", "-q", str(sweep_study(landscape, '"landscape.neighbours" = [4, 8]\n'))]) == 0
    assert "a sweep of 2 runs: neighbours-4, neighbours-8" in capsys.readouterr().out
    assert not (landscape / "swept").exists()


def test_a_mortality_scale(landscape):
    runs = expand_study(sweep_study(landscape, '"mortality.death_per_resistance" = [0.001, 0.01]\n'))
    assert [r.run_name for r in runs] == ["death_per_resistance-0.001", "death_per_resistance-0.01"]
    assert runs[1].study.settings["mortality"]["death_per_resistance"] == 0.01
