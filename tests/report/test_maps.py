"""Map helpers: scale bar, label placement, colour scales, nodata, thin and large grids."""

import io

import numpy as np
import pytest
import rasterio
from affine import Affine
from matplotlib.colors import to_rgb

from landflow.grid import Grid
from landflow.maps import (MapGeometry, block_reduce, colour_scale, new_map, patch_anchors, place_labels,
                           render_quicklook, scale_bar_length, style)
from landflow.maps._frame import draw_patches, draw_scale_bar
from landflow.maps._quicklook import ratio_labels, tick_labels
from landflow.maps.charts import cluster_order


def _geometry(rows, cols, cell=25.0, origin=(500_000.0, 5_300_000.0)):
    return MapGeometry.from_grid(Grid(np.ones((rows, cols)), np.ones((rows, cols), bool),
                                      Affine(cell, 0.0, origin[0], 0.0, -cell, origin[1]),
                                      rasterio.crs.CRS.from_epsg(25832)))


def _pixels(fig):
    """The rendered figure as an (H, W, 3) float array."""
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())[..., :3] / 255.0


def _pixel_at(fig, ax, x, y):
    px, py = ax.transData.transform((x, y))
    image = _pixels(fig)
    return image[image.shape[0] - int(round(py)), int(round(px))]


# -- the frame ----------------------------------------------------------------------------------------------
def test_extent_matches_rasterio_bounds(tmp_path):
    # rasterio.transform.array_bounds is the reference for where a grid lies on the map
    transform = Affine(30.0, 0.0, 4_321_000.0, 0.0, -20.0, 3_210_000.0)
    path = tmp_path / "r.tif"
    with rasterio.open(path, "w", driver="GTiff", height=7, width=11, count=1, dtype="float32",
                       crs="EPSG:3035", transform=transform) as dst:
        dst.write(np.ones((7, 11), "float32"), 1)
    from landflow.io.rasters import read_grid
    geometry = MapGeometry.from_grid(read_grid(path))
    west, south, east, north = rasterio.transform.array_bounds(7, 11, transform)
    assert geometry.extent == pytest.approx((west, east, south, north))
    assert geometry.units == "m" and geometry.crs_label.startswith("EPSG:3035")


@pytest.mark.parametrize("width, expected", [(8000.0, 2000.0), (30.0, 5.0), (1.0, 0.2), (123_456.0, 20_000.0)])
def test_scale_bar_length_is_round_and_at_most_a_quarter(width, expected):
    assert scale_bar_length(width) == pytest.approx(expected)
    assert scale_bar_length(width) <= width / 4


def test_scale_bar_drawn_length_in_map_units():
    # 320 cells of 25 m: 8 km wide, so a 2 km bar that spans 2000 map units on the axes
    geometry = _geometry(240, 320)
    fig, ax = new_map(geometry)
    length = draw_scale_bar(ax, geometry)
    start, end = ax.landflow_scale_bar
    assert length == 2000.0 and end - start == pytest.approx(2000.0)
    assert any(t.get_text() == "2 km" for t in ax.texts)
    # measured on screen: the bar's pixels per map unit equal the axes' own
    px0 = ax.transData.transform((start, 0))[0]
    px1 = ax.transData.transform((end, 0))[0]
    frame = ax.get_window_extent()
    assert (px1 - px0) / frame.width == pytest.approx(2000.0 / 8000.0, rel=1e-6)


def test_no_scale_bar_for_degrees():
    geometry = MapGeometry((0.01, 0.0, 5.0, 0.0, -0.01, 50.0), (10, 10), "EPSG:4326", "°", True)
    fig, ax = new_map(geometry)
    assert draw_scale_bar(ax, geometry) is None
    assert ax.get_xlabel() == "longitude (°)"


# -- labels -------------------------------------------------------------------------------------------------
def _boxes(centres, sizes):
    return [(x - w / 2, y - h / 2, x + w / 2, y + h / 2) for (x, y), (w, h) in zip(centres, sizes)]


def test_labels_stay_inside_the_frame_and_do_not_overlap():
    frame = (0.0, 0.0, 400.0, 300.0)
    # a crowded cluster, anchors on and beyond the edges, and one in a corner
    anchors = [(200 + dx, 150 + dy) for dx in (-4, 0, 4) for dy in (-4, 0, 4)] + [(-20, 10), (410, 310), (0, 0)]
    sizes = [(24.0, 12.0)] * len(anchors)
    centres = place_labels(anchors, sizes, frame, first_ring=1)
    boxes = _boxes(centres, sizes)
    for x0, y0, x1, y1 in boxes:
        assert x0 >= frame[0] - 1e-9 and y0 >= frame[1] - 1e-9 and x1 <= frame[2] + 1e-9 and y1 <= frame[3] + 1e-9
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert min(a[2], b[2]) - max(a[0], b[0]) <= 1e-9 or min(a[3], b[3]) - max(a[1], b[1]) <= 1e-9
    # labels stay near their anchors: within a few label heights of the cluster
    assert max(np.hypot(x - 200, y - 150) for x, y in centres[:9]) < 80


def test_patch_labels_on_a_map_lie_inside_its_frame_and_name_every_patch():
    labels = np.zeros((40, 60), int)
    for pid, (r, c) in enumerate([(0, 0), (0, 58), (38, 0), (38, 58), (20, 30), (21, 31), (19, 29)], start=1):
        labels[r:r + 2, c:c + 2] = pid
    geometry = _geometry(40, 60)
    fig, ax = new_map(geometry)
    placed = draw_patches(ax, labels, geometry, names={5: "Lower Meadow"})
    left, right, bottom, top = geometry.extent
    assert sorted(p[0] for p in placed) == list(range(1, 8))
    assert {p[1] for p in placed} >= {"Lower Meadow", "1", "7"}              # text labels too
    renderer = fig.canvas.get_renderer()
    frame = ax.get_window_extent(renderer)
    for text in ax.texts:
        box = text.get_window_extent(renderer)
        assert frame.x0 - 0.5 <= box.x0 and box.x1 <= frame.x1 + 0.5
        assert frame.y0 - 0.5 <= box.y0 and box.y1 <= frame.y1 + 0.5


def test_patch_anchor_lies_on_the_patch_even_for_a_ring():
    labels = np.zeros((9, 9), int)
    labels[1:8, 1:8] = 3
    labels[3:6, 3:6] = 0                                   # a ring: its centroid is not on the patch
    (pid, r, c), = patch_anchors(labels)
    assert pid == 3 and labels[r, c] == 3


# -- colour scales ------------------------------------------------------------------------------------------
def test_diverging_scale_is_centred_on_zero_even_for_lopsided_changes():
    values = np.concatenate([np.linspace(-2.0, 0.0, 50), np.linspace(0.0, 900.0, 950)])
    cmap, norm, ticks, _ = colour_scale(values, "change")
    assert norm(0.0) == pytest.approx(0.5)
    assert norm(-norm.vmax) == pytest.approx(0.0) and norm.vmin == -norm.vmax
    assert 0.0 in ticks and np.allclose(sorted(ticks), -np.sort(ticks)[::-1])   # symmetric ticks
    # the middle is the palette's lightest colour: no change reads as paper, not as a value
    lightness = [np.mean(cmap(x)[:3]) for x in np.linspace(0, 1, 21)]
    assert np.argmax(lightness) == 10


def test_log_scale_has_readable_ticks():
    for lo, hi in [(3.0, 2e5), (12.0, 40.0)]:
        values = np.geomspace(lo, hi, 500)
        _, norm, ticks, _ = colour_scale(values, "log")
        assert len(ticks) >= 3 and ticks.min() >= norm.vmin * (1 - 1e-9) and ticks.max() <= norm.vmax * (1 + 1e-9)


@pytest.mark.parametrize("lo, hi", [(1.6e6, 6.5e7), (3.0, 2e5), (1e-4, 1e8), (12.0, 40.0)])
def test_log_scale_ticks_are_few_and_in_one_notation(lo, hi):
    _, _, ticks, _ = colour_scale(np.geomspace(lo, hi, 500), "log")
    labels = tick_labels(ticks)
    assert 3 <= len(ticks) <= 12
    # one notation per bar: no "9 000 000" beside "1e7"
    assert len({"e" in label for label in labels}) == 1


def test_counts_get_whole_number_classes():
    cmap, norm, ticks, _ = colour_scale(np.array([1, 1, 2, 5, np.nan]), "count")
    assert list(ticks) == [1, 2, 3, 4, 5] and cmap.N == 5
    assert len({cmap(norm(v)) for v in (1, 2, 3, 4, 5)}) == 5       # one colour per count


def test_nodata_colour_is_distinct_from_the_lowest_value():
    rows, cols = 12, 12
    values = np.tile(np.linspace(1.0, 100.0, cols), (rows, 1))
    landscape = np.ones((rows, cols), bool)
    landscape[:, -3:] = False                                        # outside the landscape
    geometry = _geometry(rows, cols)
    for kind in ("magnitude", "log", "probability", "count"):
        shown = values / 100 if kind == "probability" else np.round(values / 20) + 1 if kind == "count" else values
        fig = render_quicklook(shown, geometry, kind=kind, landscape=landscape)
        ax = fig.axes[0]
        a, _, c, _, e, f = geometry.transform
        lowest = _pixel_at(fig, ax, c + 0.5 * a, f + e * 6.5)
        nodata = _pixel_at(fig, ax, c + (cols - 1.5) * a, f + e * 6.5)
        assert np.abs(lowest - nodata).sum() > 0.3, kind
        assert np.abs(nodata - np.array(to_rgb(style.NODATA))).sum() < 0.35 or \
            np.abs(nodata - np.array(to_rgb(style.NODATA_HATCH))).sum() < 0.35, kind


# -- awkward grids ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("shape, kind", [((1, 40), "log"), ((1, 40), "classes"), ((40, 1), "change"),
                                         ((40, 1), "count"), ((1, 1), "probability"), ((1, 1), "log")])
def test_one_cell_wide_grids_draw(shape, kind):
    values = np.linspace(-1.0 if kind == "change" else 0.1, 1.0, shape[0] * shape[1]).reshape(shape)
    if kind in ("classes", "count"):
        values = np.round(values * 3) + 1
    labels = np.zeros(shape, int)
    labels.flat[0] = 1                                             # one patch
    fig = render_quicklook(values, _geometry(*shape), kind=kind, patches=labels, backdrop=np.ones(shape),
                           marks=labels > 0, title="strip")
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    assert buffer.getvalue()[:8] == b"\x89PNG\r\n\x1a\n"
    ax = fig.axes[0]
    renderer = fig.canvas.get_renderer()
    label = [t for t in ax.texts if t.get_text() == "1"]
    assert label                                                   # the single patch is labelled
    frame = ax.get_window_extent(renderer)
    box = label[0].get_window_extent(renderer)
    if frame.width > box.width and frame.height > box.height:
        assert frame.x0 - 0.5 <= box.x0 and box.x1 <= frame.x1 + 0.5


def test_block_reduce_keeps_thin_routes_and_bounds_the_drawing(monkeypatch):
    route = np.full((300, 301), np.nan)
    route[150, :] = 1.0                                            # a route one cell wide
    reduced = block_reduce(route, 4, how="max")
    assert reduced.shape == (75, 76) and np.nansum(reduced) == 76   # every block the route crosses keeps it
    assert np.nanmean(block_reduce(np.arange(16.0).reshape(4, 4), 2)) == pytest.approx(7.5)
    # a grid over the drawing budget is drawn from blocks: the image the map holds is small
    monkeypatch.setattr(style, "MAX_MAP_PIXELS", 10_000)
    fig = render_quicklook(np.nan_to_num(route, nan=0.0), _geometry(300, 301), kind="count",
                           backdrop=np.ones((300, 301)))
    drawn = max(im.get_array().size for im in fig.axes[0].get_images())
    assert drawn <= 10_000
    assert any("blocks of" in t.get_text() for t in fig.axes[0].texts)


def test_cluster_order_keeps_groups_together():
    # two groups of patches, near within and far between: the leaf order never interleaves them
    # (average linkage, Sokal & Michener 1958, via scipy.cluster.hierarchy)
    group = np.array([0, 1, 0, 1, 0, 1])
    d = np.where(group[:, None] == group[None, :], 1.0, 10.0) + 0.01 * np.arange(6)[:, None] * np.arange(6)
    d = (d + d.T) / 2
    np.fill_diagonal(d, 0)
    order = cluster_order(d)
    labels = group[order]
    assert sorted(order) == list(range(6))
    assert (np.diff(labels) != 0).sum() == 1
    d[0, 3] = d[3, 0] = np.inf                                     # a pair no walk connects
    assert sorted(cluster_order(d)) == list(range(6))


def test_neighbouring_classes_never_share_a_colour():
    # twelve destination regions in a 3 x 4 block layout: more classes than palette colours
    values = np.kron(np.arange(1, 13, dtype=float).reshape(3, 4), np.ones((5, 5)))
    fig = render_quicklook(values, _geometry(15, 20), kind="classes")
    image = fig.axes[0].get_images()[-1]
    colours = {v: image.cmap(image.norm(v)) for v in range(1, 13)}
    for r in range(3):
        for c in range(4):
            v = 1 + 4 * r + c
            for dr, dc in ((0, 1), (1, 0)):
                if r + dr < 3 and c + dc < 4:
                    assert colours[v] != colours[v + 4 * dr + dc], (v, v + 4 * dr + dc)


def test_ratio_scale_is_centred_on_one_and_symmetric_in_the_log():
    values = np.geomspace(0.3, 2.5, 400)                 # lopsided: more room below 1 than above
    cmap, norm, ticks, _ = colour_scale(values, "ratio")
    assert float(norm(1.0)) == pytest.approx(0.5, abs=1e-12)
    assert norm.vmin * norm.vmax == pytest.approx(1.0)
    assert 1.0 in ticks and np.allclose(np.sort(ticks), np.sort(1.0 / ticks))
    assert ratio_labels([0.25, 0.5, 1.0, 2.0]) == ["1/4", "1/2", "1", "2"]
