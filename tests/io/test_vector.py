"""Patches from vector files: reprojection by pyproj, polygons by their cell centres (shapely), errors."""

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin

gpd = pytest.importorskip("geopandas")
from pyproj import Transformer  # noqa: E402
from shapely.geometry import MultiPolygon, Point, Polygon, box  # noqa: E402

import landflow as lf  # noqa: E402
from landflow.io.vector import read_patch_vector  # noqa: E402

UTM = "EPSG:32632"               # UTM zone 32 N
ORIGIN = (500_000.0, 5_300_000.0)
CELL = 30.0


@pytest.fixture
def utm_landscape(tmp_path):
    rng = np.random.default_rng(5)
    with rasterio.open(tmp_path / "resistance.tif", "w", driver="GTiff", width=40, height=30, count=1,
                       dtype="float32", crs=UTM, transform=from_origin(*ORIGIN, CELL, CELL), nodata=-9999.0) as dst:
        dst.write(rng.lognormal(0.0, 0.6, (30, 40)).astype("float32"), 1)
    return tmp_path


def centre(row, col):
    return ORIGIN[0] + (col + 0.5) * CELL, ORIGIN[1] - (row + 0.5) * CELL


SITES = {1: (3, 4), 2: (25, 35), 3: (5, 33), 4: (22, 6)}


def write_study(folder, patches, name):
    path = folder / f"{name}.toml"
    path.write_text(f'[landscape]\nresistance = "resistance.tif"\n\n[patches]\n{patches}\n\n[output]\n'
                    f'folder = "{name}_out"\nquicklooks = false\n\n[analyses.effective_resistance]\n')
    return path


def test_sites_in_a_geopackage_in_degrees_equal_the_csv_in_utm(utm_landscape):
    # the points' longitude and latitude come from pyproj, independently of landflow's reading
    to_degrees = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    rows = [(pid, *centre(*rc)) for pid, rc in SITES.items()]
    pd.DataFrame(rows, columns=["id", "x", "y"]).to_csv(utm_landscape / "sites.csv", index=False)
    lonlat = [Point(*to_degrees.transform(x, y)) for _, x, y in rows]
    gpd.GeoDataFrame({"id": list(SITES)}, geometry=lonlat, crs="EPSG:4326").to_file(utm_landscape / "sites.gpkg")
    degrees_csv = pd.DataFrame([(pid, p.x, p.y) for pid, p in zip(SITES, lonlat)], columns=["id", "x", "y"])
    degrees_csv.to_csv(utm_landscape / "sites_degrees.csv", index=False)
    results = {}
    for name, patches in [("csv", 'points = "sites.csv"'), ("gpkg", 'vector = "sites.gpkg"'),
                          ("degrees", 'points = "sites_degrees.csv"\npoints_crs = "EPSG:4326"')]:
        lf.run_study(write_study(utm_landscape, patches, name))
        results[name] = pd.read_csv(utm_landscape / f"{name}_out" / "effective_resistance.csv")
    for name in ("gpkg", "degrees"):
        pd.testing.assert_frame_equal(results[name], results["csv"])


def test_polygons_cover_the_cells_whose_centres_lie_inside(utm_landscape):
    grid = lf.read_grid(utm_landscape / "resistance.tif")
    pond = Polygon([(500_100, 5_299_900), (500_400, 5_299_950), (500_350, 5_299_700), (500_120, 5_299_760)])
    two_part = MultiPolygon([box(500_900, 5_299_300, 501_000, 5_299_400), box(501_050, 5_299_300, 501_150,
                                                                              5_299_380)])
    frame = gpd.GeoDataFrame({"id": [1, 2], "size": [3.0, 1.5]}, geometry=[pond, two_part], crs=UTM)
    frame.to_file(utm_landscape / "ponds.gpkg", layer="ponds")
    patches = read_patch_vector(utm_landscape / "ponds.gpkg", grid, layer="ponds", weight_column="size")
    for pid, shape in [(1, pond), (2, two_part)]:
        expected = np.array([[shape.contains(Point(*centre(r, c))) for c in range(40)] for r in range(30)])
        np.testing.assert_array_equal(patches.labels == pid, expected)     # shapely decides each centre
    assert patches.weight == {1: 3.0, 2: 1.5}


def test_a_thin_polygon_needs_all_touched(utm_landscape):
    grid = lf.read_grid(utm_landscape / "resistance.tif")
    strip = box(500_200, 5_299_510, 500_800, 5_299_514)         # 4 m wide: no cell centre inside
    gpd.GeoDataFrame({"id": [7]}, geometry=[strip], crs=UTM).to_file(utm_landscape / "strip.gpkg")
    with pytest.raises(lf.InputError, match=r"feature 0 \(id 7\) lies outside the raster .* or covers no cell "
                                            r"centre.*all_touched = true"):
        read_patch_vector(utm_landscape / "strip.gpkg", grid)
    touched = read_patch_vector(utm_landscape / "strip.gpkg", grid, all_touched=True)
    assert (touched.labels == 7).sum() == 21                    # 600 m over 30 m cells, both ends touched


@pytest.mark.parametrize("frame, message", [
    (lambda: gpd.GeoDataFrame({"id": [1]}, geometry=[Point(*centre(2, 2))]),
     r"the features have no CRS"),
    (lambda: gpd.GeoDataFrame({"name": [1]}, geometry=[Point(*centre(2, 2))], crs=UTM),
     r"no column 'id'; the columns are name"),
    (lambda: gpd.GeoDataFrame({"id": [1]}, geometry=[Point(0, 0)], crs=UTM),
     r"feature 0 \(id 1\) lies outside the raster"),
    (lambda: gpd.GeoDataFrame({"id": [1, 2]}, geometry=[box(500_000, 5_299_800, 500_300, 5_300_000),
                                                        box(500_200, 5_299_800, 500_500, 5_300_000)], crs=UTM),
     r"feature 1 \(id 2\) and id 1 both claim the cell at row"),
    (lambda: gpd.GeoDataFrame({"id": [1]}, geometry=[Polygon([(500_000, 5_299_000), (500_600, 5_299_600),
                                                              (500_600, 5_299_000), (500_000, 5_299_600)])],
                              crs=UTM),
     r"feature 0 \(id 1\) has an invalid geometry"),
    (lambda: gpd.GeoDataFrame({"id": [1.5]}, geometry=[Point(*centre(2, 2))], crs=UTM),
     r"feature 0 has 'id' = 1\.5; patch ids must be whole numbers > 0"),
])
def test_bad_features_are_named(utm_landscape, frame, message):
    grid = lf.read_grid(utm_landscape / "resistance.tif")
    frame().to_file(utm_landscape / "bad.gpkg")
    with pytest.raises(lf.InputError, match=rf"bad\.gpkg: {message}"):
        read_patch_vector(utm_landscape / "bad.gpkg", grid)


def test_a_file_with_several_layers_needs_one_named(utm_landscape):
    grid = lf.read_grid(utm_landscape / "resistance.tif")
    for layer in ("ponds", "wells"):
        gpd.GeoDataFrame({"id": [1]}, geometry=[Point(*centre(2, 2))], crs=UTM).to_file(
            utm_landscape / "two.gpkg", layer=layer)
    with pytest.raises(lf.InputError, match=r"two\.gpkg holds several layers \(ponds, wells\); name one with "
                                            r"'patches\.layer'"):
        read_patch_vector(utm_landscape / "two.gpkg", grid)
    with pytest.raises(lf.InputError, match=r"two\.gpkg has no layer 'lakes'; its layers are ponds, wells"):
        read_patch_vector(utm_landscape / "two.gpkg", grid, layer="lakes")


def test_the_results_geopackage_matches_the_csv_tables(utm_landscape):
    # read back with pyogrio, independently of landflow's writer: layers, geometry types, CRS, rows, values
    import pyogrio
    rows = [(pid, *centre(*rc)) for pid, rc in SITES.items()]
    pd.DataFrame(rows, columns=["id", "x", "y"]).to_csv(utm_landscape / "sites.csv", index=False)
    study = write_study(utm_landscape, 'points = "sites.csv"', "gp")
    study.write_text(study.read_text() + "\n[analyses.corridor_ranking]\n\n[analyses.least_cost_paths]\n")
    lf.run_study(study)
    out = utm_landscape / "gp_out"
    gpkg = out / "connectivity.gpkg"
    assert sorted(name for name, _ in pyogrio.list_layers(gpkg)) == ["links", "patches"]
    patches = pyogrio.read_dataframe(gpkg, layer="patches")
    links = pyogrio.read_dataframe(gpkg, layer="links")
    assert patches.crs.to_epsg() == 32632 and links.crs.to_epsg() == 32632
    assert set(patches.geom_type) <= {"Polygon", "MultiPolygon"} and set(links.geom_type) == {"LineString"}
    assert sorted(patches["patch"]) == [1, 2, 3, 4]
    assert (patches["area"] == patches["cells"] * CELL * CELL).all()
    table = pd.read_csv(out / "effective_resistance.csv")
    merged = table.merge(links, on=["patch_a", "patch_b"], suffixes=("", "_gpkg"))
    assert len(merged) == len(table) == len(links) == 6
    np.testing.assert_allclose(merged["resistance_gpkg"], merged["resistance"], rtol=1e-12)
    ranking = pd.read_csv(out / "corridor_ranking.csv")
    np.testing.assert_array_equal(links.sort_values(["patch_a", "patch_b"])["rank"],
                                  ranking.sort_values(["patch_a", "patch_b"])["rank"])
    # each link runs between points inside its two patches
    for _, link in links.iterrows():
        start, end = link.geometry.coords[0], link.geometry.coords[-1]
        a = patches.loc[patches["patch"] == link["patch_a"]].geometry.iloc[0]
        b = patches.loc[patches["patch"] == link["patch_b"]].geometry.iloc[0]
        assert a.contains(Point(start)) and b.contains(Point(end))
