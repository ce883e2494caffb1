"""Patches from vector files: formats, reprojection, polygons, text ids, and every error path."""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from pyproj import Transformer
from shapely.geometry import MultiPolygon, Point, Polygon, box

import landflow as lf
from landflow.io.rasters import read_grid
from landflow.io.vectors import patches_from_features, read_features, read_patch_features
from landflow.study.config import study_from_dict
from landflow.study.run import run_study

UTM = "EPSG:32632"
ORIGIN = (500_000.0, 5_500_000.0)
CELL = 10.0


@pytest.fixture
def landscape(tif):
    rng = np.random.default_rng(3)
    values = rng.lognormal(0.0, 0.5, (12, 16)).astype("float32")
    values[11, 0] = -9999.0
    path = tif("resistance.tif", values, nodata=-9999.0, cell=CELL, origin=ORIGIN, crs=UTM)
    return path, read_grid(path)


def centre(row, col):
    return ORIGIN[0] + (col + 0.5) * CELL, ORIGIN[1] - (row + 0.5) * CELL


def cell_box(row, col, shrink=0.0):
    x, y = centre(row, col)
    h = CELL / 2 - shrink
    return box(x - h, y - h, x + h, y + h)


def frame(geoms, ids, crs=UTM, **columns):
    return gpd.GeoDataFrame({"id": ids, **columns}, geometry=list(geoms), crs=crs)


SITES = [(1, 1, 1), (1, 2, 1), (9, 13, 2), (5, 7, 3)]      # row, col, id


def test_geopackage_in_lonlat_gives_the_resistances_of_the_csv_study(landscape, tmp_path):
    """Done-when: sites in a GeoPackage in EPSG:4326 on a UTM raster == the same sites as a CSV in UTM.
    The reference for the reprojection is pyproj's own transformation (PROJ)."""
    to_lonlat = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    xy = np.array([centre(r, c) for r, c, _ in SITES])
    lon, lat = to_lonlat.transform(xy[:, 0], xy[:, 1])
    ids = [i for *_, i in SITES]
    pd.DataFrame({"x": xy[:, 0], "y": xy[:, 1], "id": ids}).to_csv(tmp_path / "sites.csv", index=False)
    pd.DataFrame({"x": lon, "y": lat, "id": ids}).to_csv(tmp_path / "sites_lonlat.csv", index=False)
    frame([Point(a, b) for a, b in zip(lon, lat)], ids, crs="EPSG:4326").to_file(tmp_path / "sites.gpkg",
                                                                                  layer="sites")
    tables = {}
    for name, patches in {"csv": {"points": "sites.csv"},
                          "csv_lonlat": {"points": "sites_lonlat.csv", "crs": "EPSG:4326"},
                          "gpkg": {"features": "sites.gpkg"}}.items():
        study = study_from_dict({"landscape": {"resistance": "resistance.tif"}, "patches": patches,
                                 "output": {"folder": name, "quicklooks": False},
                                 "analyses": {"effective_resistance": {}}}, base_dir=tmp_path)
        run_study(study)
        tables[name] = pd.read_csv(tmp_path / name / "effective_resistance.csv")
    assert len(tables["csv"]) == 3
    for name in ("csv_lonlat", "gpkg"):
        pd.testing.assert_frame_equal(tables[name], tables["csv"])


@pytest.mark.parametrize("suffix, driver", [(".gpkg", "GPKG"), (".geojson", "GeoJSON"),
                                            (".shp", "ESRI Shapefile"), (".fgb", "FlatGeobuf")])
def test_every_format_gives_the_same_patches(landscape, tmp_path, suffix, driver):
    _, grid = landscape
    geoms = [cell_box(1, 1).union(cell_box(1, 2)), cell_box(9, 13, 2)]   # one geometry type: Shapefile
    path = tmp_path / f"patches{suffix}"
    frame(geoms, [4, 7]).to_file(path, driver=driver)
    labels = read_patch_features(path, grid).labels
    expected = np.zeros(grid.shape, np.int64)
    expected[1, 1:3] = 4
    expected[9, 13] = 7
    np.testing.assert_array_equal(labels, expected)


def test_polygons_claim_the_cells_whose_centres_they_hold_and_all_touched_every_cell_touched(landscape):
    """Reference: shapely's point-in-polygon and intersection tests on each cell (GEOS), not rasterio."""
    _, grid = landscape
    x0, y0 = ORIGIN
    triangle = Polygon([(x0 + 13, y0 - 17), (x0 + 117, y0 - 23), (x0 + 41, y0 - 96)])
    patches = patches_from_features(frame([triangle, Point(*centre(10, 14))], [1, 2]), grid)
    rows, cols = np.indices(grid.shape)
    cx, cy = grid.xy(rows, cols)
    inside = shapely.contains_xy(triangle, cx, cy)
    assert inside.sum() > 10
    np.testing.assert_array_equal(patches.labels == 1, inside)
    touched = patches_from_features(frame([triangle, Point(*centre(10, 14))], [1, 2]), grid, all_touched=True)
    boxes = shapely.box(cx - 5, cy - 5, cx + 5, cy + 5)
    np.testing.assert_array_equal(touched.labels == 1, shapely.intersects(triangle, boxes))


def test_multipart_features_and_repeated_ids_make_one_patch_each(landscape):
    _, grid = landscape
    two_ponds = MultiPolygon([cell_box(2, 2, 1), cell_box(2, 9, 1)])
    patches = patches_from_features(frame([two_ponds, cell_box(8, 3, 1), cell_box(8, 12, 1)], [5, 6, 6]), grid)
    assert patches.ids.tolist() == [5, 6]
    assert (patches.labels == 5).sum() == 2 and (patches.labels == 6).sum() == 2
    graph = lf.build_graph(grid, patches.labels)
    assert graph.n_patches == 2


def test_text_ids_get_sorted_codes_kept_in_tables_and_the_manifest(landscape, tmp_path):
    _, grid = landscape
    geoms = [cell_box(1, 1, 1), cell_box(9, 13, 1), cell_box(5, 7, 1)]
    names = ["Mill pond", "Ash pond", "Pond B"]
    frame(geoms, names, adults=[3.0, 1.0, 2.0]).to_file(tmp_path / "ponds.gpkg", layer="ponds")
    patches = read_patch_features(tmp_path / "ponds.gpkg", grid, weight_column="adults")
    assert patches.names == {1: "Ash pond", 2: "Mill pond", 3: "Pond B"}
    assert patches.labels[1, 1] == 2 and patches.labels[9, 13] == 1
    assert patches.weight == {1: 1.0, 2: 3.0, 3: 2.0}
    assert patches.id_table == {1: "Ash pond", 2: "Mill pond", 3: "Pond B"}
    study = study_from_dict({"landscape": {"resistance": "resistance.tif"},
                             "patches": {"features": "ponds.gpkg", "weight_column": "adults"},
                             "output": {"folder": "out", "quicklooks": False},
                             "analyses": {"effective_resistance": {}}}, base_dir=tmp_path)
    run_study(study)
    table = pd.read_csv(tmp_path / "out" / "effective_resistance.csv")
    assert list(table.columns[:4]) == ["patch_a", "patch_a_name", "patch_b", "patch_b_name"]
    assert table.patch_a_name.tolist() == ["Ash pond", "Ash pond", "Mill pond"]
    matrix = pd.read_csv(tmp_path / "out" / "effective_resistance_matrix.csv", index_col=0)
    assert matrix.index.tolist() == ["Ash pond", "Mill pond", "Pond B"]
    assert matrix.loc["Ash pond", "Pond B"] == pytest.approx(table.resistance[1], rel=1e-12)
    manifest = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert manifest["landscape"]["patch_names"] == {"1": "Ash pond", "2": "Mill pond", "3": "Pond B"}


def test_a_layer_is_chosen_by_name(landscape, tmp_path):
    _, grid = landscape
    path = tmp_path / "two.gpkg"
    frame([Point(*centre(1, 1)), Point(*centre(3, 3))], [1, 2]).to_file(path, layer="ponds")
    frame([Point(*centre(5, 5)), Point(*centre(7, 7))], [1, 2]).to_file(path, layer="wells")
    assert read_patch_features(path, grid, layer="wells").labels[5, 5] == 1
    with pytest.raises(lf.InputError, match=r"two.gpkg: the patch features holds 2 layers \(ponds, wells\); say"):
        read_patch_features(path, grid)
    with pytest.raises(lf.InputError, match="no layer 'lakes'.*its layers are ponds, wells. Fix the 'layer'"):
        read_patch_features(path, grid, layer="lakes")


# -- errors: each names file, layer, feature and the fix ------------------------------------------------------

def _written(tmp_path, gdf, name="bad.gpkg"):
    path = tmp_path / name
    gdf.to_file(path, layer="ponds")
    return path


@pytest.mark.filterwarnings("ignore:.crs. was not provided")
def test_features_without_a_crs_are_refused(landscape, tmp_path):
    _, grid = landscape
    path = _written(tmp_path, frame([Point(*centre(1, 1)), Point(*centre(3, 3))], [1, 2], crs=None))
    with pytest.raises(lf.InputError, match=r"bad.gpkg, layer 'ponds': the patch features have no CRS.*Set the "):
        read_patch_features(path, grid, layer="ponds")


@pytest.mark.parametrize("geom, ident, words", [
    (Point(0.0, 0.0), 2, r"feature 2 \(id 2\) lies outside the raster .*Check its coordinates and the layer's CRS"),
    (cell_box(11, 0, 1), 2, r"feature 2 \(id 2\) lies wholly on nodata cells .*Move it onto the landscape"),
    (Polygon(), 2, r"feature 2 \(id 2\) has an empty geometry. Delete the feature"),
    (Polygon([(ORIGIN[0] + 5, ORIGIN[1] - 5), (ORIGIN[0] + 60, ORIGIN[1] - 60), (ORIGIN[0] + 60, ORIGIN[1] - 5),
              (ORIGIN[0] + 5, ORIGIN[1] - 60)]), 2, r"feature 2 \(id 2\) has an invalid geometry \(Self-intersection"),
    (cell_box(1, 1, 1), 2, r"one cell is claimed by different ids \[1, 2\] at row 1, col 1.*Merge the features"),
    (box(ORIGIN[0] + 31, ORIGIN[1] - 80, ORIGIN[0] + 33, ORIGIN[1] - 20), 2,
     r"feature 2 \(id 2\) covers no cell centre .*Set 'all_touched = true'"),
    (Point(*centre(4, 4)), 0, r"feature 2 has id 0 in 'id'; numeric ids must be whole numbers > 0"),
    (shapely.LineString([centre(4, 4), centre(4, 8)]), 2, r"feature 2 \(id 2\) is a LineString; patches are points"),
])
def test_bad_features_are_named(landscape, tmp_path, geom, ident, words):
    _, grid = landscape
    path = _written(tmp_path, frame([cell_box(1, 1, 1), geom], [1, ident]))
    with pytest.raises(lf.InputError, match=r"bad.gpkg, layer 'ponds': " + words):
        read_patch_features(path, grid, layer="ponds")


def test_missing_columns_and_bad_weights_are_named(landscape, tmp_path):
    _, grid = landscape
    path = _written(tmp_path, frame([Point(*centre(1, 1)), Point(*centre(3, 3))], [1, 2], adults=[1.0, -2.0]))
    with pytest.raises(lf.InputError, match=r"layer 'ponds': missing column\(s\) 'pond'; found 'id', 'adults'"):
        read_patch_features(path, grid, id_column="pond", layer="ponds")
    with pytest.raises(lf.InputError, match=r"feature 2 \(id 2\) has 'adults' = -2.0; a patch weight must be"):
        read_patch_features(path, grid, weight_column="adults", layer="ponds")


def test_an_unreadable_file_is_named(landscape, tmp_path):
    _, grid = landscape
    (tmp_path / "junk.gpkg").write_text("not a geopackage")
    with pytest.raises(lf.InputError, match=r"cannot read the patch features '.*junk.gpkg'.*GeoPackage, GeoJSON"):
        read_features(tmp_path / "junk.gpkg", what="patch features")


def test_csv_points_with_an_unknown_crs_are_refused(landscape, tmp_path):
    _, grid = landscape
    pd.DataFrame({"x": [1.0], "y": [2.0], "id": [1]}).to_csv(tmp_path / "p.csv", index=False)
    with pytest.raises(lf.InputError, match=r"p.csv: cannot read the CRS 'EPSG:99999'"):
        lf.read_patch_points(tmp_path / "p.csv", grid, crs="EPSG:99999")


def test_study_keys_of_features_are_checked(landscape, tmp_path):
    with pytest.raises(lf.ConfigError, match=r"'patches.layer' only applies to 'patches.features'"):
        study_from_dict({"landscape": {"resistance": "resistance.tif"}, "patches": {"raster": "resistance.tif",
                         "layer": "x"}, "analyses": {"effective_resistance": {}}}, base_dir=tmp_path)
    with pytest.raises(lf.ConfigError, match=r"'patches.crs' gives the CRS of the CSV points"):
        study_from_dict({"landscape": {"resistance": "resistance.tif"}, "patches": {"raster": "resistance.tif",
                         "crs": "EPSG:4326"}, "analyses": {"effective_resistance": {}}}, base_dir=tmp_path)
