"""Regenerate the network demo: the road graph of a river valley, with five towns as zones.

Everything here is invented for demonstration; none of it describes a real place or road.
A river meanders west to east along a valley 12 km long (ETRS89 / UTM zone 32N, EPSG:25832).
A main road follows the north bank, a slower local road the south bank, three bridges join
them, side roads climb into side valleys to hamlets, and a gravel track runs along the
northern ridge between the hamlets. Each edge's resistance is its travel time in seconds:
its length times seconds per metre by road class (invented: main road 80 km/h, local road
50 km/h, bridge 40 km/h, track 20 km/h). Two short one-way streets loop through the centre
of Millford, so the study reads one-way links as two-way (``symmetrise_one_way``).

Files written next to this script:

* ``roads.gpkg``, layer ``roads``: one line per road section, with ``road_class``,
  ``seconds_per_m`` and ``oneway`` (``yes`` / ``no``);
* ``roads_with_new_bridge.gpkg``: the same, plus a planned fourth bridge (for the what-if);
* ``towns.geojson``: the five towns, four as points and Millford as a polygon around its centre.

Run:  python demo_network/make_demo.py [--out FOLDER]
"""

import argparse
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

HERE = Path(__file__).resolve().parent
CRS = "EPSG:25832"
X0, Y0 = 500_000.0, 5_300_000.0
SEED = 20261204
SECONDS_PER_M = {"main": 3.6 / 80, "local": 3.6 / 50, "bridge": 3.6 / 40, "track": 3.6 / 20}
BRIDGES = (2000.0, 5600.0, 9400.0)
NEW_BRIDGE = 7500.0


def river_y(x):
    return 3000.0 + 380.0 * np.sin(x / 1700.0) + 120.0 * np.sin(x / 530.0)


def _curve(a, b, rng, bend=0.08, parts=4):
    """A line from a to b with a few gently displaced inner vertices (roads are not straight)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    t = np.linspace(0.0, 1.0, parts + 1)[1:-1]
    normal = np.array([-(b - a)[1], (b - a)[0]]) / max(np.hypot(*(b - a)), 1e-9)
    offset = rng.normal(0.0, bend * np.hypot(*(b - a)) / parts, size=t.size)
    inner = a + t[:, None] * (b - a) + offset[:, None] * normal
    return np.vstack([a, inner, b])


def roads(seed=SEED, new_bridge=False):
    rng = np.random.default_rng(seed)
    rows = []

    def road(a, b, kind, oneway="no", bend=0.08):
        rows.append({"road_class": kind, "seconds_per_m": SECONDS_PER_M[kind], "oneway": oneway,
                     "geometry": shapely.LineString(_curve(a, b, rng, bend) + [X0, Y0])})

    xs = np.arange(0.0, 12_001.0, 600.0)
    north = [(x, river_y(x) + 520.0 + rng.normal(0, 40)) for x in xs]
    south = [(x, river_y(x) - 560.0 + rng.normal(0, 40)) for x in xs]
    for k in range(len(xs) - 1):
        road(north[k], north[k + 1], "main", bend=0.04)
        road(south[k], south[k + 1], "local")
    for bx in BRIDGES:
        k = int(np.argmin(np.abs(xs - bx)))
        road(north[k], south[k], "bridge", bend=0.02)
    # side valleys: roads up to hamlets on both sides; a ridge track joins the northern hamlets
    hamlets_north = []
    for k in range(1, len(xs) - 1, 3):
        top = (xs[k] + rng.normal(0, 150), north[k][1] + 2000.0 + rng.normal(0, 200))
        mid = ((north[k][0] + top[0]) / 2 + rng.normal(0, 120), (north[k][1] + top[1]) / 2)
        road(north[k], mid, "local")
        road(mid, top, "local")
        hamlets_north.append(top)
    for a, b in zip(hamlets_north[:-1], hamlets_north[1:]):
        road(a, b, "track", bend=0.12)
    for k in range(2, len(xs) - 1, 4):
        top = (xs[k] + rng.normal(0, 150), south[k][1] - 1800.0 + rng.normal(0, 200))
        road(south[k], top, "local")
    # Millford's centre: a one-way loop beside the bridge at 5600 m
    k = int(np.argmin(np.abs(xs - 5600.0)))
    centre = north[k]
    loop = (centre[0] + 180.0, centre[1] + 220.0)
    road(centre, loop, "local", oneway="yes", bend=0.05)
    road(loop, north[k + 1], "local", oneway="yes", bend=0.05)
    if new_bridge:          # last, so that every other road keeps its shape
        k = int(np.argmin(np.abs(xs - NEW_BRIDGE)))
        road(north[k], south[k], "bridge", bend=0.02)
    frame = gpd.GeoDataFrame(rows, crs=CRS)
    towns = {"Aldbrook": north[0], "Millford": centre, "Kestrel Bridge": south[int(np.argmin(np.abs(xs - 9400.0)))],
             "Hollin": hamlets_north[1], "Stanmere": south[-1]}
    return frame, towns


def town_features(towns, seed=SEED):
    rng = np.random.default_rng(seed + 1)
    rows = []
    for name, (x, y) in towns.items():
        # a town centre's survey point lies off the junction it belongs to, within the snap distance
        point = (x + X0 + rng.normal(0, 25), y + Y0 + rng.normal(0, 25))
        if name == "Millford":
            geometry = shapely.Point(x + X0 + 120.0, y + Y0 + 100.0).buffer(330.0, quad_segs=8)
        else:
            geometry = shapely.Point(*point)
        rows.append({"name": name, "population": {"Aldbrook": 4200, "Millford": 9800, "Kestrel Bridge": 2600,
                                                  "Hollin": 650, "Stanmere": 3100}[name], "geometry": geometry})
    return gpd.GeoDataFrame(rows, crs=CRS)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=HERE, help="folder to write to (default: beside this script)")
    out = parser.parse_args(argv).out
    out.mkdir(parents=True, exist_ok=True)
    frame, towns = roads()
    for name in ("roads.gpkg", "roads_with_new_bridge.gpkg", "towns.geojson"):
        (out / name).unlink(missing_ok=True)
    frame.to_file(out / "roads.gpkg", layer="roads", driver="GPKG", engine="pyogrio")
    changed, _ = roads(new_bridge=True)
    changed.to_file(out / "roads_with_new_bridge.gpkg", layer="roads", driver="GPKG", engine="pyogrio")
    zones = town_features(towns)
    zones.to_file(out / "towns.geojson", driver="GeoJSON", engine="pyogrio")
    print(f"{len(frame)} road sections, {len(changed) - len(frame)} planned bridge, {len(zones)} towns: "
          f"{pd.Series(frame['road_class']).value_counts().to_dict()}")


if __name__ == "__main__":
    main()
