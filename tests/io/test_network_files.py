"""Network study files: reading edges and zones, and every bad input's one-line message."""

import json
import math
import textwrap

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

import landflow as lf
from landflow.errors import ConfigError, InputError
from landflow.io.network import read_network, read_zones
from landflow.study.config import load_study

CRS = "EPSG:25832"


def write(path, text):
    path.write_text(textwrap.dedent(text).lstrip(), encoding="utf-8")
    return path


def square(tmp_path, edges=None, nodes=None):
    """A unit square a-b-c-d with zones at opposite corners a (1) and c (2)."""
    write(tmp_path / "edges.csv", edges or """
        from,to,ohms
        a,b,1
        b,c,1
        c,d,1
        d,a,1
    """)
    write(tmp_path / "nodes.csv", nodes or """
        id,x,y,zone
        a,0,0,1
        b,10,0,
        c,10,10,2
        d,0,10,0
    """)


def study(tmp_path, extra="", network=None, zones=None, analyses="[analyses.effective_resistance]"):
    network = network or 'edges = "edges.csv"\nnodes = "nodes.csv"\nresistance_column = "ohms"\ncrs = "EPSG:25832"'
    zones = zones or 'column = "zone"'
    return write(tmp_path / "study.toml", f"[network]\n{network}\n\n[zones]\n{zones}\n\n{extra}\n"
                 f"[output]\nfolder = \"out\"\n\n{analyses}\n")


def run(path):
    manifest = lf.run_study(path)
    return manifest, pd.read_csv(path.parent / "out" / "effective_resistance.csv")


def test_square_study_gives_two_paths_in_parallel(tmp_path):
    square(tmp_path)
    manifest, table = run(study(tmp_path))
    assert table["resistance"].iloc[0] == pytest.approx(1.0, abs=1e-12)      # (1 + 1) || (1 + 1)
    assert manifest["landscape"]["network"] and manifest["landscape"]["network_edges"] == 4


# -- edge lists -------------------------------------------------------------------------------------------
def test_dangling_reference_names_the_line_and_the_fix(tmp_path):
    square(tmp_path, edges="from,to,ohms\na,b,1\nb,x,1\n")
    with pytest.raises(InputError, match=r"edges.csv, line 3: 'to' names node 'x', which is not in the node table "
                                         r".*dangling reference.*Add the node"):
        lf.check_study(study(tmp_path))


@pytest.mark.parametrize("value, shown", [("0", "'0'"), ("-2", "'-2'"), ("", "nothing"), ("n/a", "'n/a'")])
def test_resistance_must_be_positive(tmp_path, value, shown):
    square(tmp_path, edges=f"from,to,ohms\na,b,1\nb,c,{value}\nc,d,1\n")
    with pytest.raises(InputError, match=rf"edges.csv, line 3 \(nodes 'b'-'c'\): 'ohms' holds {shown}, but a "
                                         "resistance must be finite and > 0"):
        lf.check_study(study(tmp_path))


def test_zero_conductance_is_refused_with_its_fix(tmp_path):
    square(tmp_path, edges="from,to,siemens\na,b,1\nb,c,0\n")
    network = 'edges = "edges.csv"\nnodes = "nodes.csv"\nconductance_column = "siemens"'
    with pytest.raises(InputError, match=r"line 3 .*'siemens' holds '0', but an edge that cannot be crossed is "
                                         "left out"):
        lf.check_study(study(tmp_path, network=network))


def test_duplicates_are_summed_in_parallel_with_a_note(tmp_path):
    square(tmp_path, edges="from,to,ohms\na,b,1\nb,c,2\nc,b,2\nc,d,1\nd,a,1\n")
    manifest, table = run(study(tmp_path))
    # b-c: 2 || 2 = 1, so again (1 + 1) || (1 + 1)
    assert table["resistance"].iloc[0] == pytest.approx(1.0, abs=1e-12)
    assert any("summed as parallel conductances" in w and "line 4" in w for w in manifest["warnings"])


def test_self_loop_is_left_out_with_a_note(tmp_path):
    square(tmp_path, edges="from,to,ohms\na,b,1\nb,b,3\nb,c,1\nc,d,1\nd,a,1\n")
    manifest, table = run(study(tmp_path))
    assert table["resistance"].iloc[0] == pytest.approx(1.0, abs=1e-12)
    assert any("joins a node to itself" in w for w in manifest["warnings"])


def test_disconnected_zones_have_infinite_resistance_and_a_warning(tmp_path):
    square(tmp_path, edges="from,to,ohms\na,b,1\nc,d,1\n")
    manifest, table = run(study(tmp_path))
    assert math.isinf(table["resistance"].iloc[0])
    assert any("falls apart" in w for w in manifest["warnings"])


def test_one_way_links_are_refused_unless_symmetrised(tmp_path):
    square(tmp_path, edges="from,to,ohms,oneway\na,b,1,no\nb,c,1,yes\nc,b,3,yes\nc,d,1,\nd,a,1,0\n")
    network = ('edges = "edges.csv"\nnodes = "nodes.csv"\nresistance_column = "ohms"\n'
               'one_way_column = "oneway"')
    with pytest.raises(InputError, match=r"line 3 \(nodes 'b'-'c'\) is one-way \('oneway' = 'yes'\), and 2 link\(s\) "
                                         r"in all; landflow's models are undirected. Set "
                                         r"'network.symmetrise_one_way = true'"):
        lf.check_study(study(tmp_path, network=network))
    _, table = run(study(tmp_path, network=network + "\nsymmetrise_one_way = true"))
    # b-c given one way in each direction: one link of the mean conductance (1 + 1/3) / 2 = 2/3, resistance 3/2
    upper, lower = 1 + 1.5, 2.0
    assert table["resistance"].iloc[0] == pytest.approx(upper * lower / (upper + lower), abs=1e-12)


def test_unknown_one_way_value_is_named(tmp_path):
    square(tmp_path, edges="from,to,ohms,oneway\na,b,1,maybe\n")
    network = 'edges = "edges.csv"\nnodes = "nodes.csv"\nresistance_column = "ohms"\none_way_column = "oneway"'
    with pytest.raises(InputError, match="'oneway' holds 'maybe'; a one-way column holds 1, -1, true"):
        lf.check_study(study(tmp_path, network=network))


def test_edge_list_without_node_table_numbers_nodes_itself(tmp_path):
    square(tmp_path)
    network = 'edges = "edges.csv"\nresistance_column = "ohms"'
    write(tmp_path / "zones.csv", "unused\n")
    # zones from a node column need the node table
    with pytest.raises(InputError, match=r"zones from a node column need a node table"):
        lf.check_study(study(tmp_path, network=network))


def test_missing_column_lists_those_found(tmp_path):
    square(tmp_path)
    network = 'edges = "edges.csv"\nnodes = "nodes.csv"\nresistance_column = "ohm"'
    with pytest.raises(InputError, match=r"no column 'ohm'; found 'from', 'to', 'ohms'"):
        lf.check_study(study(tmp_path, network=network))


def test_duplicate_node_id_in_node_table(tmp_path):
    square(tmp_path, nodes="id,x,y,zone\na,0,0,1\na,1,1,2\n")
    with pytest.raises(InputError, match=r"nodes.csv, line 3: node id 'a' appears twice"):
        lf.check_study(study(tmp_path))


# -- the study schema -------------------------------------------------------------------------------------
def test_misspelt_network_key_gets_the_close_match(tmp_path):
    square(tmp_path)
    network = 'edges = "edges.csv"\nnodes = "nodes.csv"\nresistance_colum = "ohms"'
    with pytest.raises(ConfigError, match=r"unknown key 'resistance_colum' in \[network\]. Did you mean "
                                          r"'resistance_column'\?"):
        load_study(study(tmp_path, network=network))


def test_misspelt_zone_key_gets_the_close_match(tmp_path):
    square(tmp_path)
    with pytest.raises(ConfigError, match=r"unknown key 'snap_distanse' in \[zones\]. Did you mean 'snap_distance'"):
        load_study(study(tmp_path, zones='column = "zone"\nsnap_distanse = 3.0'))


def test_exactly_one_resistance_key(tmp_path):
    square(tmp_path)
    network = 'edges = "edges.csv"\nresistance_column = "ohms"\nconductance_column = "ohms"'
    with pytest.raises(ConfigError, match=r"\[network\] needs exactly one of resistance_column, conductance_column or "
                                          "resistance_per_length_column; got resistance_column and conductance_column"):
        load_study(study(tmp_path, network=network))


def test_a_study_is_a_raster_or_a_network_not_both(tmp_path):
    square(tmp_path)
    path = study(tmp_path, extra='[landscape]\nresistance = "edges.csv"\n')
    with pytest.raises(ConfigError, match=r"has \[landscape\] as well as \[network\]; a study describes either"):
        load_study(path)


def test_zone_keys_that_need_features(tmp_path):
    square(tmp_path)
    with pytest.raises(ConfigError, match=r"'zones.snap_distance' only applies to 'zones.features'"):
        load_study(study(tmp_path, zones='column = "zone"\nsnap_distance = 3.0'))


def test_grid_only_analysis_is_refused_on_a_network(tmp_path):
    square(tmp_path)
    with pytest.raises(ConfigError, match=r"\[analyses.corridor_maps\] needs a raster landscape: corridor extents "
                                          "and pinch points are maps of cells"):
        load_study(study(tmp_path, analyses="[analyses.corridor_maps]"))


def test_raster_inputs_of_analyses_are_refused_on_a_network(tmp_path):
    square(tmp_path)
    write(tmp_path / "time.tif", "not a raster")
    path = study(tmp_path, analyses='[analyses.expected_steps]\ncrossing_time = "time.tif"')
    with pytest.raises(ConfigError, match=r"'analyses.expected_steps.crossing_time' is a raster on a landscape's grid, "
                                          "but this study is a network"):
        load_study(path)


def test_mortality_raster_is_refused_on_a_network(tmp_path):
    square(tmp_path)
    write(tmp_path / "m.tif", "x")
    with pytest.raises(ConfigError, match=r"'mortality.raster' is a raster on a landscape's grid; on a network give"):
        load_study(study(tmp_path, extra='[mortality]\nraster = "m.tif"\n'))


def test_node_mortality_must_be_a_probability(tmp_path):
    square(tmp_path, nodes="id,x,y,zone,death\na,0,0,1,0\nb,10,0,,1.5\nc,10,10,2,0\nd,0,10,,0\n")
    path = study(tmp_path, extra='[mortality]\nnode_column = "death"\n', analyses="[analyses.absorption_probability]")
    with pytest.raises(InputError, match=r"node 'b'"):
        lf.check_study(path)


def test_edge_mortality_must_be_a_probability(tmp_path):
    square(tmp_path, edges="from,to,ohms,death\na,b,1,0\nb,c,1,1\nc,d,1,0\nd,a,1,0\n")
    path = study(tmp_path, extra='[mortality]\nedge_column = "death"\n', analyses="[analyses.absorption_probability]")
    with pytest.raises(InputError, match=r"line 3 \(nodes 'b'-'c'\): the death probability of crossing the edge is "
                                         r"1.0; it must be a number in \[0, 1\)"):
        lf.check_study(path)


# -- line layers and zones from features ------------------------------------------------------------------
def lines(tmp_path, coords, name="roads.gpkg", crs=CRS, **columns):
    frame = gpd.GeoDataFrame({**columns, "geometry": [shapely.LineString(c) for c in coords]}, crs=crs)
    frame.to_file(tmp_path / name, driver="GPKG" if name.endswith("gpkg") else None, engine="pyogrio")
    return tmp_path / name


def points(tmp_path, xy, ids, name="towns.gpkg", crs=CRS):
    frame = gpd.GeoDataFrame({"id": ids, "geometry": [shapely.Point(p) for p in xy]}, crs=crs)
    frame.to_file(tmp_path / name, engine="pyogrio")
    return tmp_path / name


@pytest.mark.parametrize("name", ["roads.gpkg", "roads.shp", "roads.geojson", "roads.fgb"])
def test_line_ends_join_within_the_tolerance(tmp_path, name):
    # a - b is 10 long, b' - c starts 0.4 from b: one node with a tolerance of 1, two nodes without
    path = lines(tmp_path, [[(0, 0), (10, 0)], [(10.4, 0), (20, 0)]], name=name, cost=[2.0, 3.0])
    joined = read_network(path, resistance_column="cost", join_tolerance=1.0)
    ends = [{int(a), int(b)} for a, b in zip(joined.source, joined.target)]      # FlatGeobuf may reorder features
    assert joined.n_nodes == 3 and len(ends[0] & ends[1]) == 1
    apart = read_network(path, resistance_column="cost")
    assert apart.n_nodes == 4


def test_resistance_per_length_multiplies_the_line_length(tmp_path):
    path = lines(tmp_path, [[(0, 0), (3, 4), (3, 10)]], per_m=[0.5])       # length 5 + 6 = 11
    network = read_network(path, resistance_per_length_column="per_m")
    assert 1 / network.conductance[0] == pytest.approx(5.5)


def test_resistance_per_length_refuses_degrees(tmp_path):
    path = lines(tmp_path, [[(7, 50), (7.1, 50)]], crs="EPSG:4326", per_m=[1.0])
    with pytest.raises(InputError, match=r"the network's CRS is geographic \(degrees\).*Reproject"):
        read_network(path, resistance_per_length_column="per_m")


def test_multiline_that_does_not_join_is_refused(tmp_path):
    frame = gpd.GeoDataFrame({"cost": [1.0], "geometry": [shapely.MultiLineString([[(0, 0), (1, 0)], [(5, 5), (6, 5)]])]},
                             crs=CRS)
    frame.to_file(tmp_path / "roads.gpkg", engine="pyogrio")
    with pytest.raises(InputError, match=r"roads.gpkg, feature 1: the geometry is a MultiLineString; its parts do not "
                                         "join into one line"):
        read_network(tmp_path / "roads.gpkg", resistance_column="cost")


def test_zone_point_that_snaps_to_nothing(tmp_path):
    network = read_network(lines(tmp_path, [[(0, 0), (100, 0)]], cost=[1.0]), resistance_column="cost")
    towns = points(tmp_path, [(1, 1), (100, 40)], ["A", "B"])
    with pytest.raises(InputError, match=r"towns.gpkg, feature 2 \(zone 'B'\): the nearest node is 40 map units away, "
                                         r"beyond zones.snap_distance = 10, so it snaps to nothing"):
        read_zones(network, features=towns, snap_distance=10.0)
    zones = read_zones(network, features=towns, snap_distance=50.0)
    assert zones.labels.tolist() == [[1, 2]] and zones.names == {1: "A", 2: "B"}


def test_zone_polygon_with_no_node_inside(tmp_path):
    network = read_network(lines(tmp_path, [[(0, 0), (100, 0)], [(100, 0), (200, 0)]], cost=[1.0, 1.0]),
                           resistance_column="cost")
    frame = gpd.GeoDataFrame({"id": [1, 2], "geometry": [shapely.box(-5, -5, 105, 5), shapely.box(140, 10, 160, 30)]},
                             crs=CRS)
    frame.to_file(tmp_path / "areas.gpkg", engine="pyogrio")
    with pytest.raises(InputError, match=r"feature 2 \(zone 2\): no node of the network lies inside the polygon, so "
                                         "it snaps to nothing"):
        read_zones(network, features=tmp_path / "areas.gpkg")
    frame.geometry = [shapely.box(-5, -5, 105, 5), shapely.box(150, -10, 250, 10)]
    frame.to_file(tmp_path / "areas.gpkg", engine="pyogrio")
    assert read_zones(network, features=tmp_path / "areas.gpkg").labels.tolist() == [[1, 1, 2]]


def test_zones_in_another_crs_are_a_mismatch(tmp_path):
    network = read_network(lines(tmp_path, [[(0, 0), (100, 0)]], cost=[1.0]), resistance_column="cost")
    towns = points(tmp_path, [(7, 50), (7.001, 50)], [1, 2], crs="EPSG:4326")
    with pytest.raises(InputError, match=r"the zone features are in EPSG:4326 but the network in EPSG:25832 \(a CRS "
                                         r"mismatch\). Reproject one to the other"):
        read_zones(network, features=towns, snap_distance=10.0)


def test_node_claimed_by_two_zones(tmp_path):
    network = read_network(lines(tmp_path, [[(0, 0), (100, 0)]], cost=[1.0]), resistance_column="cost")
    towns = points(tmp_path, [(1, 1), (2, 2)], [1, 2])
    with pytest.raises(InputError, match=r"node 0 is claimed by zones 1 and 2"):
        read_zones(network, features=towns, snap_distance=10.0)


def test_line_study_writes_the_network_back(tmp_path):
    lines(tmp_path, [[(0, 0), (100, 0)], [(100, 0), (100, 100)], [(100, 100), (0, 0)]], cost=[1.0, 2.0, 3.0])
    points(tmp_path, [(0, 1), (100, 99)], [1, 2])
    network = 'edges = "roads.gpkg"\nresistance_column = "cost"'
    zones = 'features = "towns.gpkg"\nsnap_distance = 5.0'
    path = study(tmp_path, network=network, zones=zones,
                 analyses="[analyses.effective_resistance]\n[analyses.current_density]\npair_current_maps = true\n"
                          "pair_voltage_maps = true\n[analyses.restoration_gain]\n"
                          "[analyses.edge_criticality]")
    lf.run_study(path)
    out = tmp_path / "out"
    edges = gpd.read_file(out / "network.gpkg", layer="edges")
    nodes = gpd.read_file(out / "network.gpkg", layer="nodes")
    assert len(edges) == 3 and len(nodes) == 3 and edges.crs == CRS
    # R = 3 || (1 + 2) = 1.5; a unit current splits in half: 1/2 on each edge
    assert edges["current_density"].to_numpy() == pytest.approx([0.5, 0.5, 0.5])
    assert edges["current_1-2"].to_numpy() == pytest.approx([0.5, 0.5, 0.5])
    # voltage 1.5 at zone 1 (= R), 0 at zone 2, and 1.5 - 0.5 x 1 = 1 at the middle node (half the current crosses r = 1)
    assert nodes["voltage_1-2"].to_numpy() == pytest.approx([1.5, 1.0, 0.0])
    # dR/dr_e = i_e^2 = 1/4 on every edge (Ghosh, Boyd & Saberi 2008)
    assert edges["restoration_gain"].to_numpy() == pytest.approx([0.25, 0.25, 0.25])
    # without any one edge the two zones are joined by a path of resistance 3: 1/1.5 - 1/3 = 1/3 lost (series law)
    assert edges["connectivity_drop"].to_numpy() == pytest.approx([1 / 3] * 3)
    assert set(edges.columns) >= {"criticality_rank", "resistance", "length", "from", "to"}
    manifest = json.loads((out / "manifest.json").read_text())
    assert {"network.gpkg", "network_edges.csv", "network_nodes.csv"} <= {o["file"] for o in manifest["outputs"]}
    assert "Network" in (out / "report.md").read_text()
    assert "zones" in (out / "report.html").read_text()


def test_network_only_analysis_is_refused_on_a_raster(tmp_path):
    import rasterio
    profile = {"driver": "GTiff", "height": 2, "width": 2, "count": 1, "dtype": "float32",
               "transform": rasterio.transform.from_origin(0, 2, 1, 1), "crs": CRS}
    with rasterio.open(tmp_path / "r.tif", "w", **profile) as dst:
        dst.write(np.ones((1, 2, 2), dtype=np.float32))
    write(tmp_path / "study.toml", """
        [landscape]
        resistance = "r.tif"
        [patches]
        raster = "r.tif"
        [analyses.edge_criticality]
    """)
    with pytest.raises(ConfigError, match=r"\[analyses.edge_criticality\] needs a network: it ranks the edges of a "
                                          "network; on a raster, corridor_ranking ranks the links"):
        load_study(tmp_path / "study.toml")


def test_node_layer_with_a_zone_column(tmp_path):
    # a point layer of the network's nodes whose zone column is empty (or 0) outside the zones
    network = read_network(lines(tmp_path, [[(0, 0), (100, 0)], [(100, 0), (200, 0)]], cost=[1.0, 1.0]),
                           resistance_column="cost")
    frame = gpd.GeoDataFrame({"town": ["Upton", None, "Downey"], "geometry": [shapely.Point(0, 0), shapely.Point(100, 0),
                                                                            shapely.Point(200, 0)]}, crs=CRS)
    frame.to_file(tmp_path / "nodes.gpkg", engine="pyogrio")
    zones = read_zones(network, features=tmp_path / "nodes.gpkg", id_column="town", snap_distance=0.5)
    assert zones.labels.tolist() == [[2, 0, 1]] and zones.names == {1: "Downey", 2: "Upton"}


# -- zones named by their text ids in analysis settings -------------------------------------------------------
def row_of_three_roads(tmp_path, analyses):
    """Three unit roads in a row, towns West and East at the two ends (codes: East 1, West 2, sorted)."""
    lines(tmp_path, [[(0, 0), (100, 0)], [(100, 0), (200, 0)], [(200, 0), (300, 0)]], cost=[1.0, 1.0, 1.0])
    points(tmp_path, [(0, 0), (300, 0)], ["West", "East"])
    return study(tmp_path, network='edges = "roads.gpkg"\nresistance_column = "cost"',
                 zones='features = "towns.gpkg"\nsnap_distance = 5.0', analyses=analyses)


def test_zones_can_be_named_by_their_text_ids(tmp_path):
    path = row_of_three_roads(tmp_path, '[analyses.hitting_probability]\npairs = [["West", "East"]]\n')
    manifest = lf.run_study(path)
    assert "pair_maps/1-2/hitting_probability_2_before_1.png" in [o["file"] for o in manifest["outputs"]]
    nodes = pd.read_csv(tmp_path / "out" / "network_nodes.csv")
    # gambler's ruin with fair steps: P(reach West before East) from i steps east of West is 1 - i/3
    # (Feller 1968, An Introduction to Probability Theory and Its Applications, vol. 1, ch. XIV)
    assert nodes["hitting_probability_2_before_1"].tolist() == pytest.approx([1, 2 / 3, 1 / 3, 0], abs=1e-12)


def test_a_misspelt_zone_name_gets_the_close_match(tmp_path):
    path = row_of_three_roads(tmp_path, '[analyses.hitting_probability]\npairs = [["Wesst", "East"]]\n')
    with pytest.raises(ConfigError, match=r"'analyses.hitting_probability.pairs' names 'Wesst', which is no patch "
                                          r"id. Did you mean 'West'\? The patches of .*towns.gpkg are 'East', 'West'"):
        lf.run_study(path)


def test_text_ids_for_patches_with_numeric_ids_are_refused(tmp_path):
    square(tmp_path)
    path = study(tmp_path, analyses='[analyses.walk_simulation]\nrelease_patches = ["a"]\n')
    with pytest.raises(ConfigError, match=r"'analyses.walk_simulation.release_patches' names 'a', but the patches "
                                          r"of .* have numeric ids; name them by number"):
        lf.run_study(path)


def test_zone_weights_must_be_finite_non_negative_and_one_per_zone(tmp_path):
    network = read_network(lines(tmp_path, [[(0, 0), (100, 0)], [(100, 0), (200, 0)]], cost=[1.0, 1.0]),
                           resistance_column="cost")

    def towns(people):
        frame = gpd.GeoDataFrame({"id": ["A", "B", "B"], "people": people,
                                  "geometry": [shapely.Point(0, 0), shapely.Point(200, 0), shapely.Point(201, 0)]},
                                 crs=CRS)
        frame.to_file(tmp_path / "towns.gpkg", engine="pyogrio")
        return tmp_path / "towns.gpkg"

    with pytest.raises(InputError, match=r"towns.gpkg: feature 1 \(id 'A'\) has 'people' = -3.0; a zone "
                                         r"weight must be a finite number >= 0"):
        read_zones(network, features=towns([-3.0, 5.0, 5.0]), snap_distance=5.0, weight_column="people")
    with pytest.raises(InputError, match=r"the features of zone 'B' give different 'people'; features of one zone "
                                         r"must repeat the same weight"):
        read_zones(network, features=towns([1.0, 5.0, 6.0]), snap_distance=5.0, weight_column="people")
    with pytest.raises(InputError, match=r"no column 'adults' \(\[zones\] weight_column\)"):
        read_zones(network, features=towns([1.0, 5.0, 5.0]), snap_distance=5.0, weight_column="adults")
    zones = read_zones(network, features=towns([1.0, 5.0, 5.0]), snap_distance=5.0, weight_column="people")
    assert zones.weight == {1: 1.0, 2: 5.0}
