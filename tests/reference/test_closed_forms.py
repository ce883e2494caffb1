"""Effective resistance against closed forms and identities from the literature."""

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

import landflow as lf


def _resistance(values, patches, **options):
    cell = options.pop("cell", 1.0)
    graph = lf.build_graph(lf.Grid.from_array(values, cell_size=cell), patches, **options)
    return graph, lf.effective_resistance(lf.patch_voltages(graph, method="direct"))


# --- series and parallel: Ohm's series and parallel laws (common practice; Kennelly 1899, from memory) ---

@pytest.mark.parametrize("n", [2, 3, 10, 57])
@pytest.mark.parametrize("neighbours", [4, 8])
@pytest.mark.parametrize("edge_rule", ["mean_resistance", "mean_conductance"])
def test_series_strip(n, neighbours, edge_rule):
    r, d = 3.5, 25.0
    patches = np.zeros((1, n), dtype=int)
    patches[0, 0], patches[0, -1] = 1, 2
    _, resistance = _resistance(np.full((1, n), r), patches, cell=(d, 40.0), neighbours=neighbours,
                                edge_rule=edge_rule)
    # n - 1 resistors of d * r each, in series
    assert resistance[0, 1] == pytest.approx((n - 1) * d * r, rel=1e-12)


def test_series_strip_runs_along_the_cell_height():
    r, width, height, n = 2.0, 10.0, 30.0, 8
    patches = np.zeros((n, 1), dtype=int)
    patches[0, 0], patches[-1, 0] = 1, 2
    _, resistance = _resistance(np.full((n, 1), r), patches, cell=(width, height))
    assert resistance[0, 1] == pytest.approx((n - 1) * height * r, rel=1e-12)


def test_series_strip_of_varying_resistance():
    # each link is one resistor of d (r_i + r_i+1) / 2 (the edge rule of DESIGN.md); series law adds them
    r = np.array([[1.0, 4.0, 0.5, 2.0, 8.0, 1.5]])
    patches = np.zeros(r.shape, dtype=int)
    patches[0, 0], patches[0, -1] = 1, 2
    d = 20.0
    _, resistance = _resistance(r, patches, cell=d)
    expected = sum(d * (r[0, i] + r[0, i + 1]) / 2 for i in range(r.shape[1] - 1))
    assert resistance[0, 1] == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("neighbours", [4, 8])
def test_parallel_strips(neighbours):
    # rows 0 and 2 are strips of resistance r1 and r2; row 1 is nodata, so they touch only at the two
    # patches, each made of the two end cells (patches need not be contiguous)
    n, r1, r2, d = 12, 2.0, 5.0, 10.0
    values = np.full((3, n), np.nan)
    values[0], values[2] = r1, r2
    patches = np.zeros((3, n), dtype=int)
    patches[[0, 2], 0], patches[[0, 2], -1] = 1, 2
    _, resistance = _resistance(values, patches, cell=(d, 15.0), neighbours=neighbours)
    s1, s2 = (n - 1) * d * r1, (n - 1) * d * r2
    assert resistance[0, 1] == pytest.approx(s1 * s2 / (s1 + s2), rel=1e-12)


def test_parallel_strips_of_equal_resistance_halve():
    n, r, strips = 9, 1.0, 4
    values = np.full((2 * strips - 1, n), np.nan)
    values[::2] = r
    patches = np.zeros(values.shape, dtype=int)
    patches[::2, 0], patches[::2, -1] = 1, 2
    _, resistance = _resistance(values, patches, neighbours=8)
    assert resistance[0, 1] == pytest.approx((n - 1) * r / strips, rel=1e-12)


# --- the infinite square lattice of unit resistors ---
# Exact values: Atkinson & van Steenwijk 1999, "Infinite resistive lattices", Am. J. Phys. 67:486, Table I;
# Cserti 2000, "Application of the lattice Green's function for calculating the resistance of an infinite
# network of resistors", Am. J. Phys. 68:896.
LATTICE = {(1, 0): 1 / 2, (1, 1): 2 / math.pi, (2, 0): 2 - 4 / math.pi, (2, 1): 4 / math.pi - 1 / 2,
           (2, 2): 8 / (3 * math.pi), (3, 0): 17 / 2 - 24 / math.pi}


def _lattice_resistances(size):
    """R between the centre cell and each offset of LATTICE on a size x size unit grid, 4 neighbours."""
    centre = size // 2
    patches = np.zeros((size, size), dtype=int)
    patches[centre, centre] = 1
    for label, (dr, dc) in enumerate(LATTICE, start=2):
        patches[centre + dr, centre + dc] = label
    _, resistance = _resistance(np.ones((size, size)), patches, neighbours=4)
    return np.array([resistance[0, p] for p in range(1, len(LATTICE) + 1)])


def test_infinite_lattice_values_are_approached_on_large_grids():
    """The finite grid tends to the infinite lattice, from above, at the rate 1 / N^2.

    Tolerance, justified:
    * The N x N grid is a subgraph of the infinite lattice, so by Rayleigh's monotonicity law
      R_N >= R_inf, and R_N decreases as N grows (Doyle & Snell 1984, Random Walks and Electric
      Networks, section 1.4, from memory).
    * A unit current between two nearby nodes is a dipole whose current density falls off as r^-2,
      so the energy carried beyond distance N, which the finite grid lacks, is of order
      integral_N^inf r^-4 r dr ~ N^-2 (from memory; the standard multipole argument). Hence
      R_N - R_inf ~ c / N^2: doubling N must divide the excess by about 4.
    * Removing that leading term by Richardson extrapolation, R_2N + (R_2N - R_N) / 3, leaves a
      higher-order remainder; we require it below 1e-5 at N = 80 / 160, far below the excess itself
      (about 1e-4 to 1e-3 at N = 80), so the test sees the limit and not just a small grid.
    """
    exact = np.array(list(LATTICE.values()))
    sizes = (41, 81, 161)
    values = [_lattice_resistances(n) for n in sizes]
    excess = [v - exact for v in values]
    for e in excess:
        assert np.all(e > 0)                                        # Rayleigh: finite grid is above
    assert np.all(excess[1] < excess[0]) and np.all(excess[2] < excess[1])
    for coarse, fine in zip(excess, excess[1:]):
        ratio = coarse / fine                                       # -> 4 at the rate 1 / N^2
        assert np.all((ratio > 3.6) & (ratio < 4.4)), ratio
    extrapolated = values[2] + (values[2] - values[1]) / 3
    np.testing.assert_allclose(extrapolated, exact, atol=1e-5)
    # the two values the check is named for, directly on the largest grid
    assert values[2][0] == pytest.approx(0.5, abs=1e-4)
    assert values[2][1] == pytest.approx(2 / math.pi, abs=1e-4)


# --- finite grids ---

@pytest.mark.parametrize("nodes, expected", [
    ((2, 2), Fraction(1)), ((3, 2), Fraction(7, 5)), ((3, 3), Fraction(3, 2)), ((4, 2), Fraction(15, 8)),
    ((4, 3), Fraction(121, 69)), ((4, 4), Fraction(13, 7)),
])
def test_finite_grid_corner_to_corner(nodes, expected):
    # OEIS A357113 / A357114: opposite corners of an r x c grid of unit resistors (nodes = cells here)
    rows, cols = nodes
    patches = np.zeros(nodes, dtype=int)
    patches[0, 0], patches[-1, -1] = 1, 2
    _, resistance = _resistance(np.ones(nodes), patches, neighbours=4)
    assert resistance[0, 1] == pytest.approx(float(expected), rel=1e-12)


def _wu_two_point(shape, a, b):
    """Two-point resistance of a free-boundary M x N grid of unit resistors by the eigenfunction sum of
    Wu 2004, "Theory of resistor networks: the two-point resistance", J. Phys. A 37:6653."""
    def modes(size, x):
        m = np.arange(size)
        norm = np.where(m == 0, 1.0, 2.0) / size
        return np.sqrt(norm) * np.cos((x + 0.5) * m * np.pi / size), 2 - 2 * np.cos(m * np.pi / size)
    (pa_r, lam_r), (pa_c, lam_c) = modes(shape[0], a[0]), modes(shape[1], a[1])
    (pb_r, _), (pb_c, _) = modes(shape[0], b[0]), modes(shape[1], b[1])
    lam = lam_r[:, None] + lam_c[None, :]
    diff = np.outer(pa_r, pa_c) - np.outer(pb_r, pb_c)
    lam[0, 0] = 1.0
    diff[0, 0] = 0.0
    return float((diff ** 2 / lam).sum())


def test_finite_grid_any_two_nodes_match_wu():
    shape = (13, 18)
    rng = np.random.default_rng(3)
    cells = rng.choice(shape[0] * shape[1], size=5, replace=False)
    points = [divmod(int(c), shape[1]) for c in cells]
    patches = np.zeros(shape, dtype=int)
    for label, (r, c) in enumerate(points, start=1):
        patches[r, c] = label
    _, resistance = _resistance(np.ones(shape), patches, neighbours=4)
    for a in range(5):
        for b in range(a + 1, 5):
            assert resistance[a, b] == pytest.approx(_wu_two_point(shape, points[a], points[b]), rel=1e-10)


# --- identities on random graphs ---

@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("neighbours", [4, 8])
def test_foster_first_theorem(seed, neighbours):
    """sum over edges of c_e R_e = n - (number of connected pieces).

    Foster 1949, "The average impedance of an electrical network" (venue from memory): n - 1 on a
    connected graph; summing over pieces gives n minus the number of pieces.
    Every cell is made its own patch so landflow reports R between all node pairs.
    """
    rng = np.random.default_rng(seed)
    values = rng.lognormal(0.0, 1.0, size=(5, 6))
    values[rng.random(values.shape) < 0.2] = np.nan
    labels = np.arange(1, values.size + 1).reshape(values.shape)
    graph, resistance = _resistance(values, labels, neighbours=neighbours, cell=(20.0, 30.0))
    i, j, c = graph.edges
    pieces = graph.components.max() + 1
    assert np.sum(c * resistance[i, j]) == pytest.approx(graph.n_nodes - pieces, rel=1e-10)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(values=arrays(np.float64, st.tuples(st.integers(2, 5), st.integers(2, 5)),
                     elements=st.one_of(st.floats(0.05, 20.0), st.just(np.nan))),
       data=st.data(), neighbours=st.sampled_from([4, 8]))
def test_triangle_inequality(values, data, neighbours):
    # effective resistance is a metric (Klein & Randic 1993, "Resistance distance", J. Math. Chem. 12:81)
    labels = data.draw(arrays(np.int64, values.shape, elements=st.integers(0, 3)))
    seeds = data.draw(st.lists(st.integers(0, values.size - 1), min_size=3, max_size=3, unique=True))
    for label, cell in enumerate(seeds, start=1):          # every patch has at least one valid cell
        labels.flat[cell] = label
        if np.isnan(values.flat[cell]):
            values.flat[cell] = 1.0
    labels = np.where(np.isfinite(values), labels, 0)
    _, r = _resistance(values, labels, neighbours=neighbours)
    for a, b, c in [(0, 1, 2), (1, 2, 0), (2, 0, 1)]:
        assert r[a, c] <= r[a, b] + r[b, c] + 1e-9 * (r[a, b] + r[b, c])
