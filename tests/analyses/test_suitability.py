"""Resistance from habitat suitability against the published transform at hand-computed points.

Source: Keeley, Beier & Gagnon 2016, "Estimating landscape resistance from habitat suitability:
effects of data source and nonlinearities", Landscape Ecology 31:2151, doi:10.1007/s10980-016-0387-5:
R = 100 - 99 (1 - exp(-c h)) / (1 - exp(-c)), h = suitability on 0-1; linear R = 100 - 99 h.
"""

import numpy as np
import pytest

from landflow.analyses.suitability import resistance_from_suitability
from landflow.errors import InputError


class TestLinear:
    def test_end_points_and_quarter(self):
        # R = 100 - 99 h: h = 0 -> 100, h = 1/4 -> 100 - 24.75 = 75.25, h = 1 -> 1
        r = resistance_from_suitability([[0.0, 0.25, 1.0]])
        np.testing.assert_allclose(r, [[100.0, 75.25, 1.0]], rtol=0, atol=1e-12)

    def test_percent_scale_is_the_same_map(self):
        # a 0-100 map: s = 25 is h = 0.25
        r = resistance_from_suitability([[25.0]], scale=100)
        assert r[0, 0] == pytest.approx(75.25, abs=1e-12)

    def test_other_maximum(self):
        # R = Rmax - (Rmax - 1) h with Rmax = 1000 at h = 0.5: 1000 - 499.5 = 500.5
        assert resistance_from_suitability([[0.5]], max_resistance=1000)[0, 0] == pytest.approx(500.5)


class TestNegativeExponential:
    # By hand, with exp(-4) = 0.0183156, exp(-8) = 0.000335463, exp(-0.125) = 0.882497,
    # exp(-0.25) = 0.778801, exp(-0.2) = 0.818731, exp(-2) = 0.135335:
    #   c = 8,    h = 0.5: 100 - 99 * 0.981684 / 0.999665 = 100 - 97.2194 = 2.7806
    #   c = 0.25, h = 0.5: 100 - 99 * 0.117503 / 0.221199 = 100 - 52.5897 = 47.4103
    #   c = 2,    h = 0.1: 100 - 99 * 0.181269 / 0.864665 = 100 - 20.7545 = 79.2455
    @pytest.mark.parametrize("c, h, expected", [(8, 0.5, 2.7806), (0.25, 0.5, 47.4103), (2, 0.1, 79.2455)])
    def test_hand_computed_points(self, c, h, expected):
        r = resistance_from_suitability([[h]], transform="negative_exponential", shape=c)
        assert r[0, 0] == pytest.approx(expected, abs=1e-4)

    def test_end_points_for_any_shape(self):
        for c in (0.25, 1, 16):
            r = resistance_from_suitability([[0.0, 1.0]], transform="negative_exponential", shape=c)
            np.testing.assert_allclose(r, [[100.0, 1.0]], atol=1e-9)

    def test_small_shape_tends_to_linear(self):
        # (1 - exp(-c h)) / (1 - exp(-c)) -> h as c -> 0 (Taylor expansion, first order)
        h = np.linspace(0, 1, 11)[None, :]
        near = resistance_from_suitability(h, transform="negative_exponential", shape=1e-6)
        np.testing.assert_allclose(near, resistance_from_suitability(h), atol=1e-3)


class TestErrors:
    def test_out_of_range_cell_is_located(self):
        values = np.array([[0.2, 0.4], [1.7, 0.1]])
        with pytest.raises(InputError, match=r"1 cell\(s\) have a suitability outside 0-1 \(first: 1.7 at row 1, col 0\)"):
            resistance_from_suitability(values)

    def test_cells_outside_the_mask_are_ignored(self):
        values = np.array([[0.2, 55.0]])
        r = resistance_from_suitability(values, mask=[[True, False]])
        assert r[0, 0] == pytest.approx(100 - 99 * 0.2) and np.isnan(r[0, 1])

    def test_shape_required(self):
        with pytest.raises(ValueError, match="needs a shape c > 0"):
            resistance_from_suitability([[0.5]], transform="negative_exponential")
