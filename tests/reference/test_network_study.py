"""Network studies run end to end (study file -> runner -> tables) against outside references.

* networkx resistance_distance and edge current flow on random graphs written as CSV edge lists, and on the
  demo's road network read from its GeoPackage (the truth is networkx's, built here from the lines with
  geopandas, independently of landflow's reader);
* a raster study and the network study of the raster's exported edge list give the same numbers to 1e-10;
* restoration gain per edge against central finite differences of networkx's resistance;
* least-cost distance against networkx's Dijkstra;
* absorption with a death probability per edge against the absorbing chain's linear system, written here
  from the definitions (Kemeny & Snell 1960, Finite Markov Chains, ch. III).
"""

import itertools
import textwrap
from pathlib import Path

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely

import landflow as lf
from landflow.graph import cell_edges

DEMO = Path(__file__).resolve().parents[2] / "demo_network"


def random_edges(seed, n=25, extra=35):
    """A connected random graph: a random spanning tree plus extra edges, resistances log-normal."""
    rng = np.random.default_rng(seed)
    order = rng.permutation(n)
    pairs = [(int(order[i]), int(order[rng.integers(0, i)])) for i in range(1, n)]
    while len(pairs) < n - 1 + extra:
        a, b = (int(v) for v in rng.choice(n, 2, replace=False))
        if (a, b) not in pairs and (b, a) not in pairs:
            pairs.append((a, b))
    return pairs, rng.lognormal(0.0, 0.8, len(pairs))


def write_study(folder, body, analyses):
    path = folder / "study.toml"
    path.write_text(textwrap.dedent(body).lstrip() + '\n[output]\nfolder = "out"\nquicklooks = false\n\n'
                    + "\n".join(f"[analyses.{a}]" for a in analyses) + "\n", encoding="utf-8")
    return path


def csv_study(folder, pairs, resistance, zone_of, analyses, extra=""):
    """A study of a CSV edge list (node ids as text 'n<k>') with a node table holding the zones."""
    pd.DataFrame({"from": [f"n{a}" for a, _ in pairs], "to": [f"n{b}" for _, b in pairs],
                  "seconds": resistance}).to_csv(folder / "edges.csv", index=False)
    n = 1 + max(max(p) for p in pairs)
    pd.DataFrame({"id": [f"n{k}" for k in range(n)], "zone": [zone_of.get(k, 0) for k in range(n)]}).to_csv(
        folder / "nodes.csv", index=False)
    return write_study(folder, f"""
        [network]
        edges = "edges.csv"
        nodes = "nodes.csv"
        resistance_column = "seconds"

        [zones]
        column = "zone"
        {extra}
        """, analyses)


def reference(pairs, resistance):
    g = nx.Graph()
    for (a, b), r in zip(pairs, resistance):
        g.add_edge(a, b, resistance=float(r), conductance=1.0 / float(r))
    return g


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_network_study_resistance_and_edge_current_equal_networkx(tmp_path, seed):
    # networkx.resistance_distance reads the weight as a resistance by default (networkx documentation);
    # edge_current_flow_betweenness_centrality_subset(G, [s], [t], normalized=False) gives |i_e| / 4 for a unit
    # current from s to t (networkx documentation and source; see docs/validation.md)
    pairs, resistance = random_edges(seed)
    sites = [1, 7, 12, 20]
    path = csv_study(tmp_path, pairs, resistance, {s: k + 1 for k, s in enumerate(sites)},
                     ["effective_resistance", "current_density"])
    lf.run_study(path)
    table = pd.read_csv(tmp_path / "out" / "effective_resistance.csv")
    g = reference(pairs, resistance)
    for (p, a), (q, b) in itertools.combinations(enumerate(sites, start=1), 2):
        row = table[(table["patch_a"] == p) & (table["patch_b"] == q)]
        assert row["resistance"].iloc[0] == pytest.approx(nx.resistance_distance(g, a, b, weight="resistance"),
                                                          rel=1e-10)
    edges = pd.read_csv(tmp_path / "out" / "network_edges.csv")
    expected = np.zeros(len(pairs))
    for a, b in itertools.combinations(sites, 2):
        flow = nx.edge_current_flow_betweenness_centrality_subset(g, [a], [b], normalized=False, weight="conductance")
        expected += [4 * flow.get((x, y), flow.get((y, x))) for x, y in pairs]
    assert edges["current_density"].to_numpy() == pytest.approx(expected, rel=1e-9, abs=1e-12)


def demo_reference_graph(merge=True):
    """The demo roads as a networkx graph built here: nodes are line ends (rounded to 1 cm), resistance is
    length x seconds_per_m, parallel roads summed as conductances; with ``merge``, each zone's nodes are one node
    (named by the zone) and roads inside a zone dropped, as a merged patch has no inner resistance."""
    roads = gpd.read_file(DEMO / "roads.gpkg", layer="roads", engine="pyogrio")
    towns = gpd.read_file(DEMO / "towns.geojson", engine="pyogrio")
    ends = [((round(line.coords[0][0], 2), round(line.coords[0][1], 2)),
             (round(line.coords[-1][0], 2), round(line.coords[-1][1], 2))) for line in roads.geometry]
    nodes = sorted({n for pair in ends for n in pair})
    xy = np.array(nodes)
    zone_nodes = {}
    for name, geom in zip(towns["name"], towns.geometry):
        if geom.geom_type == "Point":
            zone_nodes[name] = [nodes[int(np.argmin(np.hypot(*(xy - [geom.x, geom.y]).T)))]]
        else:
            zone_nodes[name] = [n for n in nodes if geom.intersects(shapely.Point(n))]
    rename = {n: name for name, members in zone_nodes.items() for n in members} if merge else {}
    g = nx.Graph()
    for (a, b), line, per_m in zip(ends, roads.geometry, roads["seconds_per_m"]):
        a, b = rename.get(a, a), rename.get(b, b)
        if a == b:
            continue
        c = 1.0 / (line.length * per_m)
        if g.has_edge(a, b):
            g[a][b]["conductance"] += c
        else:
            g.add_edge(a, b, conductance=c)
    return g, zone_nodes


def test_demo_road_network_study_equals_networkx(tmp_path):
    # the demo's own study file, without its weights and mortality, read from the GeoPackage by landflow
    path = write_study(tmp_path, f"""
        [network]
        edges = "{DEMO / 'roads.gpkg'}"
        layer = "roads"
        resistance_per_length_column = "seconds_per_m"
        join_tolerance = 1.0
        one_way_column = "oneway"
        symmetrise_one_way = true

        [zones]
        features = "{DEMO / 'towns.geojson'}"
        id_column = "name"
        snap_distance = 150.0
        """, ["effective_resistance", "current_density"])
    lf.run_study(path)
    g, zone_nodes = demo_reference_graph()
    assert len(zone_nodes["Millford"]) >= 2            # the polygon zone merges several junctions
    table = pd.read_csv(tmp_path / "out" / "effective_resistance.csv")
    for row in table.itertuples():
        expected = nx.resistance_distance(g, row.patch_a_name, row.patch_b_name, weight="conductance",
                                          invert_weight=False)
        assert row.resistance == pytest.approx(expected, rel=1e-10)
    edges = pd.read_csv(tmp_path / "out" / "network_edges.csv")
    assert len(edges) == len(gpd.read_file(DEMO / "roads.gpkg", engine="pyogrio"))


def test_demo_edge_currents_of_one_pair_equal_networkx(tmp_path):
    # Aldbrook and Stanmere only: both single-node zones, so no merging is involved
    g, zone_nodes = demo_reference_graph(merge=False)
    towns = gpd.read_file(DEMO / "towns.geojson", engine="pyogrio")
    towns[towns["name"].isin(["Aldbrook", "Stanmere"])].to_file(tmp_path / "two.geojson", engine="pyogrio")
    path = write_study(tmp_path, f"""
        [network]
        edges = "{DEMO / 'roads.gpkg'}"
        resistance_per_length_column = "seconds_per_m"
        join_tolerance = 1.0
        one_way_column = "oneway"
        symmetrise_one_way = true

        [zones]
        features = "two.geojson"
        id_column = "name"
        snap_distance = 150.0
        """, ["current_density"])
    lf.run_study(path)
    edges = pd.read_csv(tmp_path / "out" / "network_edges.csv")
    nodes = pd.read_csv(tmp_path / "out" / "network_nodes.csv")
    a, b = zone_nodes["Aldbrook"][0], zone_nodes["Stanmere"][0]
    flow = nx.edge_current_flow_betweenness_centrality_subset(g, [a], [b], normalized=False, weight="conductance")
    key = {int(n): (round(x, 2), round(y, 2)) for n, x, y in zip(nodes["node"], nodes["x"], nodes["y"])}
    # node coordinates in the table are the mean of the joined ends: equal to 1 cm here
    ours = {frozenset((key[f], key[t])): c for f, t, c in zip(edges["from"], edges["to"], edges["current_density"])}
    for (u, v), value in flow.items():
        assert ours[frozenset((u, v))] == pytest.approx(4 * value, rel=1e-8, abs=1e-12)


def test_raster_study_and_its_exported_edge_list_agree_to_1e10(tmp_path):
    # the same circuit twice: a raster study, and a network study of the raster's own cell edges
    rng = np.random.default_rng(11)
    rows, cols = 9, 12
    values = rng.lognormal(1.0, 0.7, (rows, cols)).astype(np.float64)
    labels = np.zeros((rows, cols), dtype=np.int32)
    labels[0:2, 0:2], labels[7:9, 10:12], labels[4, 6], labels[0, 11] = 1, 2, 3, 4
    transform = rasterio.transform.from_origin(500_000.0, 5_300_000.0, 10.0, 10.0)
    profile = {"driver": "GTiff", "height": rows, "width": cols, "count": 1, "crs": "EPSG:25832",
               "transform": transform}
    with rasterio.open(tmp_path / "r.tif", "w", dtype="float64", nodata=-1.0, **profile) as dst:
        dst.write(values, 1)
    with rasterio.open(tmp_path / "p.tif", "w", dtype="int32", nodata=0, **profile) as dst:
        dst.write(labels, 1)
    analyses = ["effective_resistance", "arrival_probability", "expected_steps", "corridor_ranking",
                "least_cost_paths", "current_density"]
    raster = tmp_path / "raster"
    raster.mkdir()
    write_study(raster, f"""
        [landscape]
        resistance = "{tmp_path / 'r.tif'}"

        [patches]
        raster = "{tmp_path / 'p.tif'}"
        """, analyses)
    lf.run_study(raster / "study.toml")
    grid = lf.read_grid(tmp_path / "r.tif")
    edges = cell_edges(grid)
    network = tmp_path / "network"
    network.mkdir()
    pd.DataFrame({"from": edges.cell_i, "to": edges.cell_j, "conductance": edges.conductance,
                  "metres": edges.distance}).to_csv(network / "edges.csv", index=False, float_format="%.17g")
    xs, ys = grid.xy(*np.divmod(np.arange(rows * cols), cols))
    pd.DataFrame({"id": np.arange(rows * cols), "x": xs, "y": ys, "zone": labels.ravel()}).to_csv(
        network / "nodes.csv", index=False, float_format="%.17g")
    write_study(network, """
        [network]
        edges = "edges.csv"
        nodes = "nodes.csv"
        conductance_column = "conductance"
        crs = "EPSG:25832"

        [zones]
        column = "zone"
        """, analyses)
    lf.run_study(network / "study.toml")
    for name, columns in [("effective_resistance.csv", ["resistance", "escape_probability_a_to_b",
                                                        "escape_probability_b_to_a", "commute_time"]),
                          ("arrival_probability.csv", ["probability"]),
                          ("expected_steps_from_patch.csv", ["expected_steps"]),
                          ("corridor_ranking.csv", ["connectivity_drop", "effective_resistance"]),
                          ("least_cost_distance.csv", ["least_cost_distance", "path_cells"])]:
        a, b = pd.read_csv(raster / "out" / name), pd.read_csv(network / "out" / name)
        for column in columns:
            assert b[column].to_numpy() == pytest.approx(a[column].to_numpy(), rel=1e-10, abs=1e-14), (name, column)
    # current through every cell: the raster's GeoTIFF is float32, so compare at its precision
    with rasterio.open(raster / "out" / "current_density.tif") as src:
        cells = src.read(1)
    nodes = pd.read_csv(network / "out" / "network_nodes.csv")
    assert nodes["current_density"].to_numpy() == pytest.approx(cells.ravel().astype(float), rel=1e-6)


def test_edge_restoration_gain_equals_finite_differences_of_networkx(tmp_path):
    # dR/dr_e = i_e^2 (Ghosh, Boyd & Saberi 2008, SIAM Review 50:37; formula from memory), checked by central
    # differences of networkx.resistance_distance
    pairs, resistance = random_edges(5, n=14, extra=12)
    path = csv_study(tmp_path, pairs, resistance, {2: 1, 9: 2}, ["restoration_gain"])
    lf.run_study(path)
    gain = pd.read_csv(tmp_path / "out" / "network_edges.csv")["restoration_gain"].to_numpy()
    h = 1e-5
    for e in range(len(pairs)):
        up, down = resistance.copy(), resistance.copy()
        up[e] += h
        down[e] -= h
        diff = (nx.resistance_distance(reference(pairs, up), 2, 9, weight="resistance")
                - nx.resistance_distance(reference(pairs, down), 2, 9, weight="resistance")) / (2 * h)
        assert gain[e] == pytest.approx(diff, rel=1e-6, abs=1e-9)      # a drop of R per unit reduction of r_e


def test_least_cost_distance_equals_networkx_dijkstra(tmp_path):
    pairs, resistance = random_edges(6)
    sites = [0, 8, 19]
    path = csv_study(tmp_path, pairs, resistance, {s: k + 1 for k, s in enumerate(sites)}, ["least_cost_paths"])
    lf.run_study(path)
    table = pd.read_csv(tmp_path / "out" / "least_cost_distance.csv")
    g = reference(pairs, resistance)
    for row in table.itertuples():
        a, b = sites[row.patch_a - 1], sites[row.patch_b - 1]
        assert row.least_cost_distance == pytest.approx(nx.dijkstra_path_length(g, a, b, weight="resistance"),
                                                        rel=1e-12)
    use = pd.read_csv(tmp_path / "out" / "network_edges.csv")["least_cost_paths"].to_numpy()
    expected = np.zeros(len(pairs))
    index = {frozenset(p): e for e, p in enumerate(pairs)}
    for a, b in itertools.combinations(sites, 2):
        route = nx.dijkstra_path(g, a, b, weight="resistance")
        for u, v in zip(route[:-1], route[1:]):
            expected[index[frozenset((u, v))]] += 1
    assert use.tolist() == expected.tolist()


def test_edge_mortality_absorption_equals_the_absorbing_chain(tmp_path):
    # A walker at x takes edge e = xy with probability c_e / C_x and dies on it with probability m_e. Then
    # h_A(x) = P_x(reach A first) solves h = Q h + r with Q_xy = P_xy (1 - m_xy) between transient nodes and
    # r_x = sum over y in A of P_xy (1 - m_xy) (Kemeny & Snell 1960, Finite Markov Chains, ch. III: B = N R).
    pairs, resistance = random_edges(8, n=16, extra=14)
    rng = np.random.default_rng(8)
    death = rng.uniform(0.0, 0.3, len(pairs))
    zone_of = {3: 1, 11: 2}
    path = csv_study(tmp_path, pairs, resistance, zone_of, ["absorption_probability"],
                     extra='[mortality]\nedge_column = "death"')
    frame = pd.read_csv(tmp_path / "edges.csv")
    frame["death"] = death
    frame.to_csv(tmp_path / "edges.csv", index=False, float_format="%.17g")
    lf.run_study(path)
    nodes = pd.read_csv(tmp_path / "out" / "network_nodes.csv")
    n = 16
    P = np.zeros((n, n))
    survive = np.zeros((n, n))
    for (a, b), r, m in zip(pairs, resistance, death):
        P[a, b] += 1 / r
        P[b, a] += 1 / r
        survive[a, b] += (1 - m) / r
        survive[b, a] += (1 - m) / r
    hop = survive / P.sum(axis=1, keepdims=True)
    transient = [k for k in range(n) if k not in zone_of]
    Q = hop[np.ix_(transient, transient)]
    for zone_node, zone in zone_of.items():
        h = np.linalg.solve(np.eye(len(transient)) - Q, hop[transient, zone_node])
        ours = nodes["absorption_probability_patch_%d" % zone].to_numpy()[transient]
        assert ours == pytest.approx(h, rel=1e-9, abs=1e-12)
    dead = 1 - sum(np.linalg.solve(np.eye(len(transient)) - Q, hop[transient, z]) for z in zone_of)
    assert nodes["death_probability"].to_numpy()[transient] == pytest.approx(dead, rel=1e-9, abs=1e-12)


def test_what_if_on_a_changed_edge_table_equals_networkx(tmp_path):
    pairs, resistance = random_edges(9, n=18, extra=15)
    path = csv_study(tmp_path, pairs, resistance, {0: 1, 10: 2, 15: 3}, ["scenario_change"])
    changed = resistance.copy()
    changed[[2, 5, 9]] *= [0.1, 5.0, 0.5]
    pd.DataFrame({"from": [f"n{a}" for a, _ in pairs], "to": [f"n{b}" for _, b in pairs],
                  "seconds": changed}).to_csv(tmp_path / "changed.csv", index=False, float_format="%.17g")
    text = path.read_text().replace("[analyses.scenario_change]",
                                    '[analyses.scenario_change]\nchanged_landscape = "changed.csv"')
    path.write_text(text)
    lf.run_study(path)
    table = pd.read_csv(tmp_path / "out" / "scenario_change.csv")
    sites = {1: 0, 2: 10, 3: 15}
    for row in table.itertuples():
        a, b = sites[row.patch_a], sites[row.patch_b]
        assert row.resistance_before == pytest.approx(
            nx.resistance_distance(reference(pairs, resistance), a, b, weight="resistance"), rel=1e-10)
        assert row.resistance_after == pytest.approx(
            nx.resistance_distance(reference(pairs, changed), a, b, weight="resistance"), rel=1e-10)


def test_edge_criticality_equals_networkx_without_each_edge(tmp_path):
    # the drop of sum_ab 1 / R_ab when one edge is removed, recomputed by networkx on the graph without it; zone 4
    # hangs on a single edge (a bridge: losing it cuts zone 4 off, 1 / R = 0 for its pairs), and one pair of nodes
    # is joined twice (losing one of two parallel edges)
    pairs, resistance = random_edges(12, n=15, extra=12)
    pairs = pairs + [(3, 15), (pairs[0][0], pairs[0][1])]
    resistance = np.concatenate([resistance, [0.7, 1.9]])
    zone_of = {1: 1, 6: 2, 11: 3, 15: 4}
    path = csv_study(tmp_path, pairs, resistance, zone_of, ["edge_criticality"])
    path.write_text(path.read_text().replace("[analyses.edge_criticality]",
                                             "[analyses.edge_criticality]\ntop_edges = 0"))
    lf.run_study(path)
    edges = pd.read_csv(tmp_path / "out" / "network_edges.csv")

    def connectivity(keep):
        g = nx.MultiGraph()
        g.add_nodes_from(range(16))
        for (a, b), r in zip(np.array(pairs)[keep], resistance[keep]):
            g.add_edge(int(a), int(b), conductance=1.0 / r)
        simple = nx.Graph()
        simple.add_nodes_from(g.nodes)
        for a, b, data in g.edges(data=True):     # parallel edges add as conductances
            c = simple.edges[a, b]["conductance"] + data["conductance"] if simple.has_edge(a, b) else data["conductance"]
            simple.add_edge(a, b, conductance=c)
        total = 0.0
        for a, b in itertools.combinations(sorted(zone_of), 2):
            if nx.has_path(simple, a, b):
                piece = simple.subgraph(nx.node_connected_component(simple, a))
                total += 1.0 / nx.resistance_distance(piece, a, b, weight="conductance", invert_weight=False)
        return total

    before = connectivity(np.ones(len(pairs), dtype=bool))
    for e in range(len(pairs)):
        keep = np.ones(len(pairs), dtype=bool)
        keep[e] = False
        assert edges["connectivity_drop"].iloc[e] == pytest.approx(before - connectivity(keep), rel=1e-8, abs=1e-12)
    table = pd.read_csv(tmp_path / "out" / "edge_criticality.csv")
    bridge = table[table["bridge"]]
    assert set(zip(bridge["from"], bridge["to"])) >= {("n3", "n15")}
    assert table["rank"].iloc[0] == 1 and table["connectivity_drop"].is_monotonic_decreasing


def test_node_mortality_absorption_equals_the_absorbing_chain(tmp_path):
    # a walker at x dies with probability kappa_x, else hops to y with probability c_xy / C_x: h = Q h + r with
    # Q_xy = (1 - kappa_x) P_xy (Kemeny & Snell 1960, Finite Markov Chains, ch. III)
    pairs, resistance = random_edges(13, n=14, extra=10)
    zone_of = {0: 1, 9: 2}
    kappa = np.random.default_rng(13).uniform(0.0, 0.2, 14)
    kappa[list(zone_of)] = 0.0
    path = csv_study(tmp_path, pairs, resistance, zone_of, ["absorption_probability"],
                     extra='[mortality]\nnode_column = "death"')
    nodes = pd.read_csv(tmp_path / "nodes.csv")
    nodes["death"] = kappa
    nodes.to_csv(tmp_path / "nodes.csv", index=False, float_format="%.17g")
    lf.run_study(path)
    out = pd.read_csv(tmp_path / "out" / "network_nodes.csv")
    C = np.zeros((14, 14))
    for (a, b), r in zip(pairs, resistance):
        C[a, b] += 1 / r
        C[b, a] += 1 / r
    hop = (1 - kappa)[:, None] * C / C.sum(axis=1, keepdims=True)
    transient = [k for k in range(14) if k not in zone_of]
    Q = hop[np.ix_(transient, transient)]
    for zone_node, zone in zone_of.items():
        h = np.linalg.solve(np.eye(len(transient)) - Q, hop[transient, zone_node])
        assert out[f"absorption_probability_patch_{zone}"].to_numpy()[transient] == pytest.approx(h, rel=1e-9,
                                                                                                    abs=1e-12)
