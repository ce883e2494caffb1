"""Regenerate the demo scenario: pond-breeding amphibians in a farmland valley cut by a road.

Everything here is invented for demonstration; none of it describes a real place.
The landscape is 240 x 320 cells of 25 m (6 x 8 km) in ETRS89 / UTM zone 32N.

Resistance per metre of travel (invented, for illustration only):
woodland 1, hedgerows and stream banks 2, pasture 4, arable 10,
farmyards and villages 40, the road 150. Ponds are the patches: round polygons in a GeoPackage
(ponds.gpkg, in longitude/latitude, EPSG:4326, as a field survey's GPS would give them), with
a numeric id, a name and the adults counted; ponds.tif is the same ponds rasterised.
Per-step death probability of a dispersing walker (invented): 0.3 on the road, 0.001 elsewhere.

Run:  python demo_rasters/make_demo.py   (writes next to this script)
"""

from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import from_origin
from scipy import ndimage

HERE = Path(__file__).resolve().parent
ROWS, COLS, CELL = 240, 320, 25.0
TRANSFORM = from_origin(500_000.0, 5_300_000.0, CELL, CELL)
CRS = "EPSG:25832"
SEED = 20261202


def landscape(seed=SEED):
    rng = np.random.default_rng(seed)
    rows, cols = np.mgrid[0:ROWS, 0:COLS]
    # valley floor runs west-east; the stream meanders along it
    stream_row = 120 + 18 * np.sin(cols / 37.0) + 6 * np.sin(cols / 11.0)
    dist_stream = np.abs(rows - stream_row)
    # fields: a mosaic of rectangles, pasture near the stream, arable on the slopes
    field_id = (rows // 20) * 100 + (cols // 24)
    field_draw = rng.random(field_id.max() + 1)[field_id]
    resistance = np.where(field_draw < np.clip(1.1 - dist_stream / 80, 0.2, 0.9), 4.0, 10.0)
    # woodland blobs on the valley sides
    noise = ndimage.gaussian_filter(rng.standard_normal((ROWS, COLS)), 9)
    woodland = (noise > np.quantile(noise, 0.82)) & (dist_stream > 25)
    resistance[woodland] = 1.0
    # hedgerows on some field edges
    hedge = ((rows % 20 == 0) | (cols % 24 == 0)) & (field_draw > 0.45)
    resistance[hedge & ~woodland] = 2.0
    # stream banks
    resistance[dist_stream < 2.5] = 2.0
    # two villages
    for r0, c0 in ((70, 60), (175, 250)):
        village = (rows - r0) ** 2 / 12**2 + (cols - c0) ** 2 / 16**2 < 1
        resistance[village] = 40.0
    # the road: crosses the valley from north-west to south-east, 2 cells wide
    road_col = 40 + rows * 0.9 + 10 * np.sin(rows / 30.0)
    road = np.abs(cols - road_col) < 1.0
    resistance[road] = 150.0
    # a quarry outside the landscape (nodata)
    quarry = (rows - 25) ** 2 / 9**2 + (cols - 285) ** 2 / 14**2 < 1
    resistance[quarry] = np.nan
    return resistance, road, dist_stream


NAMES = ["Alder pond", "Mill pond", "Heron pond", "Willow pond", "Church pond", "Orchard pond",
         "Quarry pond", "Sedge pond", "Moor pond", "Lark pond"]


def pond_polygons(seed=SEED):
    """The ponds as round polygons in the raster's CRS (map coordinates), with their ids and names."""
    import geopandas as gpd
    from shapely.geometry import Point

    rng = np.random.default_rng(seed + 1)
    centres = [(40, 30), (95, 110), (150, 40), (205, 95), (60, 200), (130, 175),
               (190, 215), (105, 290), (215, 300), (30, 130)]
    geoms, densities = [], []
    for r0, c0 in centres:
        radius = rng.uniform(1.5, 3.5) * CELL
        x, y = TRANSFORM * (c0 + 0.5, r0 + 0.5)
        geoms.append(Point(x, y).buffer(radius, quad_segs=16))
        densities.append(rng.uniform(5, 40))     # adults per cell
    return gpd.GeoDataFrame({"id": np.arange(1, len(centres) + 1), "name": NAMES, "density": densities},
                            geometry=geoms, crs=CRS)


def ponds(resistance, seed=SEED):
    """Pond labels (the cells whose centres lie in a pond), adults per cell, and the GeoPackage layer in
    EPSG:4326 with each pond's adults counted."""
    from rasterio.features import rasterize

    frame = pond_polygons(seed)
    labels = rasterize(zip(frame.geometry, frame["id"]), out_shape=(ROWS, COLS), transform=TRANSFORM,
                       fill=0, dtype="uint8")
    labels[~np.isfinite(resistance)] = 0
    population = np.zeros((ROWS, COLS), dtype=np.float32)
    for pond, density in zip(frame["id"], frame["density"]):
        population[labels == pond] = density
    frame["adults"] = [float(population[labels == pond].sum()) for pond in frame["id"]]
    return labels, population, frame.drop(columns="density").to_crs("EPSG:4326")


def with_underpass(resistance, road, dist_stream):
    """The landscape after an (invented) wildlife underpass: the road cells where the stream
    passes under the road get stream-bank resistance (2), as if a wide culvert with dry ledges
    were built there. For the what-if scenario of the demo study."""
    changed = resistance.copy()
    underpass = road & (dist_stream < 3.0)
    changed[underpass] = 2.0
    return changed


def road_mortality(resistance, road):
    """Invented per-step death probability: 0.3 on the road, 0.001 elsewhere (nodata outside the landscape)."""
    mortality = np.where(road, 0.3, 0.001).astype(np.float32)
    mortality[~np.isfinite(resistance)] = np.nan
    return mortality


def suitability(resistance, seed=SEED):
    """Habitat suitability on 0-1 for the sweep demo: high in woodland, low on the road (invented)."""
    rng = np.random.default_rng(seed + 2)
    by_cover = {1.0: 0.95, 2.0: 0.8, 4.0: 0.55, 10.0: 0.25, 40.0: 0.05, 150.0: 0.01}
    values = np.full(resistance.shape, np.nan)
    for cover, value in by_cover.items():
        values[resistance == cover] = value
    noise = rng.uniform(-0.04, 0.04, resistance.shape)
    return np.where(np.isnan(values), np.nan, np.clip(values + noise, 0.0, 1.0))


def write(name, array, dtype, nodata):
    profile = {"driver": "GTiff", "height": ROWS, "width": COLS, "count": 1, "dtype": dtype,
               "crs": CRS, "transform": TRANSFORM, "nodata": nodata, "compress": "deflate"}
    data = np.where(np.isnan(array), nodata, array) if np.issubdtype(np.asarray(array).dtype, np.floating) else array
    with rasterio.open(HERE / name, "w", **profile) as dst:
        dst.write(data.astype(dtype), 1)


def main():
    resistance, road, _ = landscape()
    labels, population, pond_layer = ponds(resistance)
    (HERE / "ponds.gpkg").unlink(missing_ok=True)
    pond_layer.to_file(HERE / "ponds.gpkg", layer="ponds", driver="GPKG", engine="pyogrio")
    write("resistance.tif", resistance, "float32", -9999.0)
    write("ponds.tif", labels, "uint8", 0)
    write("pond_population.tif", population, "float32", -9999.0)
    write("resistance_with_underpass.tif", with_underpass(*landscape()), "float32", -9999.0)
    write("road_mortality.tif", road_mortality(resistance, road), "float32", -9999.0)
    write("suitability.tif", suitability(resistance), "float32", -9999.0)
    print(f"wrote demo rasters and ponds.gpkg to {HERE}")


if __name__ == "__main__":
    main()
