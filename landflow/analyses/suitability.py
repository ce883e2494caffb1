"""Resistance from habitat suitability: the linear and negative-exponential transforms."""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["TRANSFORMS", "resistance_from_suitability"]

#: The transforms :func:`resistance_from_suitability` knows.
TRANSFORMS = ("linear", "negative_exponential")


def resistance_from_suitability(suitability, *, scale=1.0, transform="linear", shape=None,
                                max_resistance=100.0, mask=None, where=None, source="suitability"):
    """Turn habitat suitability into resistance per unit length.

    Suitability ``s`` on ``[0, scale]`` is first rescaled to ``h = s / scale``
    on ``[0, 1]``. Then, with ``R_max = max_resistance`` (100 in the source):

    - linear: ``R = R_max - (R_max - 1) h``
    - negative exponential with shape ``c > 0``:
      ``R = R_max - (R_max - 1) (1 - exp(-c h)) / (1 - exp(-c))``

    Both give ``R = R_max`` on the least suitable cells (h = 0) and ``R = 1``
    on the most suitable (h = 1). The negative exponential tends to the
    linear transform as c -> 0; the larger c, the longer resistance stays
    near 1 as suitability falls, rising steeply only near h = 0 (animals
    cross moderately suitable land freely and avoid only the least suitable).

    Parameters
    ----------
    suitability : array_like, shape (rows, cols)
        Habitat suitability; cells outside ``mask`` are ignored.
    scale : float
        The suitability of a fully suitable cell: 1 for a 0-1 map, 100 for a
        0-100 map.
    transform : {"linear", "negative_exponential"}
    shape : float, optional
        The shape parameter c of the negative exponential (required for it,
        not allowed with the linear transform).
    max_resistance : float
        Resistance of a cell of suitability 0; must exceed 1.
    mask : array_like of bool, optional
        Cells inside the landscape; default all finite cells.
    where : callable(row, col) -> str, optional
        Locates a cell for error messages (for example ``Grid.where``).
    source : str
        Name of the suitability raster, for error messages.

    Returns
    -------
    ndarray of float64
        Resistance per unit length (dimensionless multiple of the resistance
        of a fully suitable cell); NaN outside ``mask``.

    Raises
    ------
    InputError
        A suitability value inside the mask is negative, above ``scale`` or
        not finite; the message counts them and locates the first.
    ValueError
        An unknown transform or a bad parameter (a programming error; study
        files are validated before this is reached).

    Notes
    -----
    Cost: O(cells) time and memory.

    References
    ----------
    Keeley, A. T. H., Beier, P. & Gagnon, J. W. (2016). Estimating landscape
    resistance from habitat suitability: effects of data source and
    nonlinearities. Landscape Ecology 31:2151.
    https://doi.org/10.1007/s10980-016-0387-5 . The equation
    ``R = 100 - 99 (1 - exp(-c h)) / (1 - exp(-c))`` is the paper's (as
    reproduced by several independent users citing it; the range of shapes,
    c = 0.25 to 16, from memory). The linear form is its c -> 0 limit and the
    common "resistance = 100 minus suitability" rule rescaled to 1-100.

    Examples
    --------
    >>> resistance_from_suitability([[0.0, 0.5, 1.0]])
    array([[100. ,  50.5,   1. ]])
    >>> r = resistance_from_suitability([[50.0]], scale=100, transform="negative_exponential", shape=8)
    >>> round(float(r[0, 0]), 4)
    2.7806
    """
    if transform not in TRANSFORMS:
        raise ValueError(f"transform must be one of {', '.join(TRANSFORMS)}; got {transform!r}.")
    if transform == "negative_exponential" and (shape is None or not shape > 0):
        raise ValueError(f"the negative exponential needs a shape c > 0; got {shape!r}.")
    if transform == "linear" and shape is not None:
        raise ValueError("the linear transform takes no shape parameter.")
    if not scale > 0:
        raise ValueError(f"scale must be > 0; got {scale!r}.")
    if not max_resistance > 1:
        raise ValueError(f"max_resistance must be > 1; got {max_resistance!r}.")
    values = np.asarray(suitability, dtype=np.float64)
    mask = np.isfinite(values) if mask is None else np.asarray(mask, dtype=bool)
    bad = mask & ~((values >= 0) & (values <= scale))
    if bad.any():
        row, col = (int(i) for i in np.argwhere(bad)[0])
        place = where(row, col) if where is not None else f"row {row}, col {col}"
        raise InputError(f"{source}: {int(bad.sum())} cell(s) have a suitability outside 0-{scale:g} "
                         f"(first: {float(values[row, col]):g} at {place}). Set the suitability scale to match "
                         f"the map (1 for 0-1, 100 for 0-100) or mark those cells as nodata.")
    h = np.where(mask, values, 0.0) / scale
    if transform == "linear":
        fraction = h
    else:
        fraction = -np.expm1(-shape * h) / -np.expm1(-shape)
    resistance = max_resistance - (max_resistance - 1.0) * fraction
    return np.where(mask, resistance, np.nan)
