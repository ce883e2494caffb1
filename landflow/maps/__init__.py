"""Maps and charts in landflow's own look (see :mod:`landflow.maps.style`).

* :func:`quicklook` / :func:`render_quicklook`: one raster layer as a map, coloured for its kind of quantity.
* :func:`new_map` + :func:`finish_map`: a reusable map frame (map coordinates with units, coordinate grid,
  scale bar, north arrow, CRS) for other pictures, such as networks drawn with line widths;
  :func:`draw_patches` outlines and labels patches on it.
* :func:`network_map` / :func:`render_network_map`: a network with line widths and colours by value.
* :mod:`landflow.maps.charts`: the report's charts as SVG.
"""

from . import style
from ._frame import (MapGeometry, block_reduce, describe_crs, draw_patches, finish_map, new_map, patch_anchors,
                     place_labels, scale_bar_length)
from ._network import network_map, render_network_map
from ._quicklook import KINDS, colour_scale, quicklook, render_quicklook

__all__ = ["style", "MapGeometry", "block_reduce", "describe_crs", "draw_patches", "finish_map", "new_map",
           "patch_anchors", "place_labels", "scale_bar_length", "KINDS", "colour_scale", "quicklook",
           "render_quicklook", "network_map", "render_network_map"]
