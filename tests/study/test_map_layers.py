"""map_layers.gpkg read back with pyogrio and checked against the CSV tables of the same run."""

import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
import shapely
from pyproj import CRS

import landflow as lf

ANALYSES = """[analyses.effective_resistance]

[analyses.corridor_ranking]

[analyses.least_cost_paths]

[analyses.restoration_gain]
top_cells = 5

[analyses.corridor_maps]
pairs = [[1, 2]]
top_cells = 3
"""


@pytest.fixture
def run(study, tmp_path):
    lf.run_study(study(analyses=ANALYSES))
    return tmp_path / "results"


def test_layers_hold_the_numbers_of_the_tables(run):
    path = run / "map_layers.gpkg"
    layers = dict(pyogrio.list_layers(path).tolist())
    assert layers == {"patches": "Polygon", "patch_links": "LineString", "least_cost_routes": "LineString",
                      "restoration_cells": "Point", "corridor_cells": "Point"}
    for name in layers:
        assert CRS(pyogrio.read_info(path, layer=name)["crs"]) == CRS("EPSG:3035")

    polygons = pyogrio.read_dataframe(path, layer="patches")
    with rasterio.open(run.parent / "patches.tif") as src:
        labels = src.read(1)
    assert polygons.patch.tolist() == [1, 2] and polygons.cells.tolist() == [2, 2]
    np.testing.assert_allclose(polygons.area, [200.0, 200.0])       # two 10 m x 10 m cells each
    for code, geom in zip(polygons.patch, polygons.geometry):       # polygons hold exactly their cells' centres
        rows, cols = np.indices(labels.shape)
        x = 4_321_000.0 + (cols + 0.5) * 10.0
        y = 3_210_000.0 - (rows + 0.5) * 10.0
        np.testing.assert_array_equal(shapely.contains_xy(geom, x, y), labels == code)

    links = pyogrio.read_dataframe(path, layer="patch_links")
    resistance = pd.read_csv(run / "effective_resistance.csv")
    ranking = pd.read_csv(run / "corridor_ranking.csv")
    least = pd.read_csv(run / "least_cost_distance.csv")
    assert len(links) == len(resistance) == 1
    for col in ("resistance", "escape_probability_a_to_b", "escape_probability_b_to_a", "commute_time"):
        np.testing.assert_allclose(links[col], resistance[col], rtol=1e-12)
    np.testing.assert_allclose(links.least_cost_distance, least.least_cost_distance, rtol=1e-12)
    assert links["rank"].tolist() == ranking["rank"].tolist()
    a, b = shapely.get_coordinates(links.geometry[0])
    assert shapely.contains_xy(polygons.geometry[0], *a) and shapely.contains_xy(polygons.geometry[1], *b)

    routes = pyogrio.read_dataframe(path, layer="least_cost_routes")
    assert routes.path_cells.tolist() == least.path_cells.tolist()
    np.testing.assert_allclose(routes.path_length, least.path_length, rtol=1e-12)
    # the line runs through each route cell's centre plus one cell of each end patch
    assert len(shapely.get_coordinates(routes.geometry[0])) == least.path_cells[0] + 2

    for layer, table in (("restoration_cells", "restoration_gain_cells.csv"), ("corridor_cells", "corridor_cells.csv")):
        points = pyogrio.read_dataframe(path, layer=layer)
        expected = pd.read_csv(run / table)
        assert len(points) == len(expected) > 0
        np.testing.assert_allclose(points.geometry.x, expected.x)
        np.testing.assert_allclose(points.geometry.y, expected.y)


def test_map_layers_can_be_turned_off(study, tmp_path):
    lf.run_study(study(output='folder = "results"\nquicklooks = false\nmap_layers = false'))
    assert not (tmp_path / "results" / "map_layers.gpkg").exists()


def test_every_raster_of_a_run_is_a_cog_with_its_description_and_units(run):
    import json
    manifest = json.loads((run / "manifest.json").read_text(encoding="utf-8"))
    rasters = [o for o in manifest["outputs"] if o["file"].endswith(".tif")]
    assert len(rasters) >= 3
    for item in rasters:
        with rasterio.open(run / item["file"]) as src:
            assert src.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG", item["file"]
            assert src.descriptions == (item["description"],) and src.units == (item["units"],)
            assert src.nodata == -9999.0


def test_cell_size_is_printed_beside_resistances(run):
    table = pd.read_csv(run / "effective_resistance.csv")
    assert table.cell_width.tolist() == [10.0] and table.cell_height.tolist() == [10.0]
    assert table.values_per.tolist() == ["length"]
    report = (run / "report.md").read_text(encoding="utf-8")
    assert "on cells of 10 x 10 map units, values read per length (these numbers scale with the cell size" in report
