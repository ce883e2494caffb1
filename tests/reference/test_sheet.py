"""Values read per square of a continuous sheet: the result no longer depends on the cell size, and converges to
the closed form for two disc electrodes as the grid is refined."""

import numpy as np
import pytest

import landflow as lf


def discs(L, a, D, h, *, neighbours=4, values_per="square"):
    """Two discs of radius a, centres D apart, in the middle of an L x L insulated sheet of rho = 1, cells h."""
    n = int(round(L / h))
    c = (np.arange(n) + 0.5) * h
    x, y = np.meshgrid(c, c)
    labels = np.zeros((n, n), dtype=int)
    labels[np.hypot(x - (L - D) / 2, y - L / 2) <= a] = 1
    labels[np.hypot(x - (L + D) / 2, y - L / 2) <= a] = 2
    grid = lf.Grid.from_array(np.ones((n, n)), cell_size=h)
    graph = lf.build_graph(grid, labels, neighbours=neighbours, values_per=values_per)
    return lf.effective_resistance(lf.patch_voltages(graph))[0, 1]


@pytest.mark.parametrize("neighbours", [4, 8])
def test_two_discs_converge_to_the_closed_form(neighbours):
    """Closed form: two equal discs of radius a, centres D apart, in an infinite sheet of sheet resistance rho:
    R = (rho / pi) arccosh(D / 2a) ~ (rho / pi) ln(D / a). It is the 2-D analogue of the capacitance per unit
    length of two parallel cylinders, C' = pi eps / arccosh(D / 2a) (Smythe 1968, Static and Dynamic
    Electricity, 3rd ed., McGraw-Hill, section on parallel cylinders; from memory), by R C' = rho eps.
    The grid is refined 2x and 4x (cells 1, 1/2, 1/4; a = 2, D = 16, domain 64 x 64); the insulated edge of the
    finite domain reads higher, which the domain doubled at the coarsest cells measures (a correction falling as
    1 / L^2, so R_64 - R_inf = 4/3 (R_64 - R_128))."""
    a, D = 2.0, 16.0
    r1, r2, r4 = (discs(64, a, D, h, neighbours=neighbours) for h in (1.0, 0.5, 0.25))
    assert r1 > r2 > r4                                         # converging from above
    ratio = (r1 - r2) / (r2 - r4)
    assert 2.0 < ratio < 4.0                                    # measured 2.9: the error shrinks with the cell
    extrapolated = r4 - (r2 - r4) / (ratio - 1.0)               # Richardson, with the observed ratio
    edge = 4.0 / 3.0 * (discs(64, a, D, 1.0, neighbours=neighbours) - discs(128, a, D, 1.0, neighbours=neighbours))
    closed = np.arccosh(D / (2 * a)) / np.pi                    # 0.6568
    assert extrapolated - edge == pytest.approx(closed, rel=0.005)    # measured within 0.1%
    assert closed == pytest.approx(np.log(D / a) / np.pi, rel=0.01)   # the small-disc form, for reference


def test_per_square_does_not_depend_on_the_cell_size_and_per_length_does():
    """One lattice with cells of 1, 10 and 30 m: per square gives one R; per length R grows with the cell."""
    rng = np.random.default_rng(4)
    values = rng.lognormal(0.0, 0.5, (20, 30))
    labels = np.zeros((20, 30), dtype=int)
    labels[8:12, 2:5], labels[8:12, 25:28] = 1, 2
    def r(cell, per):
        grid = lf.Grid.from_array(values, cell_size=cell)
        return lf.effective_resistance(lf.patch_voltages(lf.build_graph(grid, labels, values_per=per)))[0, 1]
    assert r(10.0, "square") == pytest.approx(r(1.0, "square"), rel=1e-12)
    assert r(30.0, "square") == pytest.approx(r(1.0, "square"), rel=1e-12)
    assert r(30.0, "length") == pytest.approx(30 * r(1.0, "length"), rel=1e-12)


@pytest.mark.parametrize("cell", [(1.0, 1.0), (2.0, 0.5), (0.5, 3.0)])
def test_a_bar_of_sheet_has_rho_length_over_width_for_any_cell_shape(cell):
    """A rectangular bar of a uniform sheet, ends held by patches: R = rho (length / width) (Ohm's law for a
    sheet: resistance per square times the number of squares). Exact with 4 neighbours, for any cell shape."""
    w, h = cell
    rows, cols = 6, 11
    labels = np.zeros((rows, cols), dtype=int)
    labels[:, 0], labels[:, -1] = 1, 2
    grid = lf.Grid.from_array(np.full((rows, cols), 3.0), cell_size=cell)
    graph = lf.build_graph(grid, labels, neighbours=4, values_per="square")
    r = lf.effective_resistance(lf.patch_voltages(graph))[0, 1]
    assert r == pytest.approx(3.0 * (cols - 1) * w / (rows * h), rel=1e-12)


def test_values_per_is_checked():
    with pytest.raises(lf.InputError, match="values_per must be 'length' or 'square'; got 'metre'"):
        lf.build_graph(lf.Grid.from_array([[1.0, 1.0]]), values_per="metre")


def test_restoration_gain_follows_the_sheet_reading():
    """dR/dr of one cell by central finite differences (Taylor's theorem) equals the restoration gain."""
    rng = np.random.default_rng(5)
    values = rng.lognormal(0.0, 0.4, (7, 9))
    labels = np.zeros((7, 9), dtype=int)
    labels[3, 0], labels[3, 8] = 1, 2
    def resistance(v):
        graph = lf.build_graph(lf.Grid.from_array(v, cell_size=(3.0, 2.0)), labels, values_per="square")
        return lf.effective_resistance(lf.patch_voltages(graph))[0, 1]
    grid = lf.Grid.from_array(values, cell_size=(3.0, 2.0))
    voltages = lf.patch_voltages(lf.build_graph(grid, labels, values_per="square"))
    gain = lf.restoration_gain(voltages, grid, lf.pair_weights(voltages))
    step = 1e-6
    for cell in [(3, 4), (1, 2), (5, 7)]:
        up, down = values.copy(), values.copy()
        up[cell] += step
        down[cell] -= step
        assert gain[cell] == pytest.approx((resistance(up) - resistance(down)) / (2 * step), rel=1e-5)
