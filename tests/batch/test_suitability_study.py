"""Studies whose landscape is a suitability raster: validation and equivalence with a resistance raster."""

import numpy as np
import pandas as pd
import pytest
import rasterio

from study_fixtures import study_text, write_raster, write_study
from landflow.errors import ConfigError
from landflow.study.config import load_study
from landflow.study.run import run_study

NEGEXP = 'suitability = "suitability.tif"\nsuitability_transform = "negative_exponential"\nsuitability_shape = 4'


def test_suitability_study_equals_resistance_study(landscape):
    # the same landscape given as resistance made by hand from the published formula
    with rasterio.open(landscape / "suitability.tif") as src:
        h = src.read(1).astype(float)
    by_hand = 100 - 99 * (1 - np.exp(-4 * h)) / (1 - np.exp(-4))   # Keeley, Beier & Gagnon 2016
    write_raster(landscape / "made.tif", by_hand.astype(np.float32))
    a = run_study(write_study(landscape / "a.toml", study_text(NEGEXP, folder="a")))
    b = run_study(write_study(landscape / "b.toml", study_text('resistance = "made.tif"', folder="b")))
    ra = pd.read_csv(landscape / "a" / "effective_resistance.csv")
    rb = pd.read_csv(landscape / "b" / "effective_resistance.csv")
    np.testing.assert_allclose(ra["resistance"], rb["resistance"], rtol=1e-5)
    assert "resistance_from_suitability.tif" in [o["file"] for o in a["outputs"]]
    assert "resistance_from_suitability.tif" not in [o["file"] for o in b["outputs"]]


def test_what_if_on_a_suitability_landscape_goes_through_the_transform(landscape):
    # a changed suitability raster is read as suitability: the same map changes nothing, and a change
    # equals a fresh run on the changed map (both through the Keeley, Beier & Gagnon 2016 transform)
    with rasterio.open(landscape / "suitability.tif") as src:
        h = src.read(1)
    better = h.copy()
    better[10:14, 10:20] = 1.0                       # restored habitat
    write_raster(landscape / "better.tif", better)
    for changed, folder in (("suitability.tif", "same"), ("better.tif", "changed")):
        extra = f'[analyses.scenario_change]\nchanged_landscape = "{changed}"'
        run_study(write_study(landscape / f"{folder}.toml", study_text(NEGEXP, folder=folder, extra=extra)))
    same = pd.read_csv(landscape / "same" / "scenario_change.csv")
    np.testing.assert_array_equal(same["resistance_change"], 0.0)
    run_study(write_study(landscape / "fresh.toml", study_text(NEGEXP.replace("suitability.tif", "better.tif"),
                                                               folder="fresh")))
    changed = pd.read_csv(landscape / "changed" / "scenario_change.csv")
    fresh = pd.read_csv(landscape / "fresh" / "effective_resistance.csv")
    np.testing.assert_allclose(changed["resistance_after"], fresh["resistance"], rtol=1e-10)
    assert (changed["resistance_change"] < 0).any()


@pytest.mark.parametrize("landscape_keys, message", [
    ('suitability = "suitability.tif"\nsuitability_transform = "negative_exponential"',
     r"needs 'suitability_shape'"),
    ('suitability = "suitability.tif"\nsuitability_shape = 2',
     r"'suitability_shape' only applies to suitability_transform = 'negative_exponential'"),
    ('suitability = "suitability.tif"\nresistance = "resistance.tif"',
     r"needs exactly one of resistance, conductance or suitability; got resistance and suitability"),
    ('suitability = "suitability.tif"\nsuitability_transform = "exponential"',
     r"must be one of 'linear', 'negative_exponential'; got 'exponential'. Did you mean 'negative_exponential'\?"),
    ('suitability = "suitability.tif"\nsuitability_shap = 2',
     r"s.toml: unknown key 'suitability_shap' in \[landscape\]. Did you mean 'suitability_shape'\?"),
    ('suitability = "suitability.tif"\nsuitability_scale = 0',
     r"'landscape.suitability_scale' = 0.0: must be greater than 0"),
])
def test_bad_suitability_settings(landscape, landscape_keys, message):
    with pytest.raises(ConfigError, match=message):
        load_study(write_study(landscape / "s.toml", study_text(landscape_keys)))


def test_percent_map_read_with_the_wrong_scale(landscape):
    with rasterio.open(landscape / "suitability.tif") as src:
        write_raster(landscape / "percent.tif", src.read(1) * 100)
    study = write_study(landscape / "s.toml", study_text('suitability = "percent.tif"'))
    with pytest.raises(ValueError, match=r"percent.tif: \d+ cell\(s\) have a suitability outside 0-1 .*row \d+, col \d+ "
                                         r"\(x=.*Set the suitability scale"):
        run_study(study)
    assert not (landscape / "results").exists()
    fixed = write_study(landscape / "s.toml", study_text('suitability = "percent.tif"\nsuitability_scale = 100'))
    assert run_study(fixed)["settings"]["landscape"]["suitability_scale"] == 100.0
