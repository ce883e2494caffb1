"""Quick-look maps and the plain-language run report."""

from __future__ import annotations

import textwrap

import numpy as np

from .io._atomic import atomic_path

__all__ = ["quicklook", "write_report"]


def quicklook(path, array, *, patches=None, title="", units="", log_scale=True, categorical=False):
    """Save a PNG map of ``array``: perceptually uniform colours, optional log stretch, patch outlines.

    NaN cells are left blank. With ``log_scale`` the colours span the 1st to
    the 99.9th percentile of the positive values on a log scale, and cells
    <= 0 are left blank too; without it they span the same percentiles of all
    values. With ``categorical`` (whole-number classes such as patch ids)
    every class gets a colour from a qualitative map (the 20 colours repeat
    past 20 classes) and, up to 30 classes, its own tick.
    """
    # A Figure of its own, not pyplot's global state: safe when runs share a process (threaded workers).
    from matplotlib.colors import LogNorm, Normalize
    from matplotlib.figure import Figure

    data = np.ma.masked_invalid(np.asarray(array, dtype=float))
    positive = data.compressed()
    if log_scale:
        positive = positive[positive > 0]
    norm = None
    classes = np.unique(data.compressed()) if categorical else None
    if categorical:
        import matplotlib
        from matplotlib.colors import BoundaryNorm, ListedColormap
        palette = matplotlib.colormaps["tab20" if classes.size > 10 else "tab10"]
        cmap = ListedColormap([palette(i % palette.N) for i in range(max(classes.size, 1))])
        edges = np.concatenate([classes - 0.5, [classes[-1] + 0.5]]) if classes.size else np.array([0.0, 1.0])
        norm = BoundaryNorm(edges, cmap.N) if classes.size else None
    elif positive.size:
        lo, hi = np.percentile(positive, [1, 99.9])
        if log_scale and hi > lo > 0:
            norm = LogNorm(vmin=lo, vmax=hi, clip=True)
            data = np.ma.masked_less_equal(data, 0)
        elif hi > lo:
            norm = Normalize(vmin=lo, vmax=hi, clip=True)
    rows, cols = data.shape
    width = 8.0
    fig = Figure(figsize=(width, max(3.0, width * rows / cols * 0.9)), dpi=120)
    ax = fig.subplots()
    image = ax.imshow(data, cmap=cmap if categorical else "viridis", norm=norm, interpolation="nearest")
    if patches is not None and (np.asarray(patches) > 0).any():
        ax.contour(np.asarray(patches) > 0, levels=[0.5], colors="white", linewidths=0.8)
    bar = fig.colorbar(image, ax=ax, shrink=0.85, ticks=classes if categorical and classes.size <= 30 else None)
    label = units + (" (log scale)" if isinstance(norm, LogNorm) else "")
    bar.set_label(textwrap.fill(label, 48))
    ax.set_title(title)
    ax.set_xlabel("column")
    ax.set_ylabel("row")
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")


def write_report(path, manifest, caution):
    """A short Markdown account of a run: inputs, key numbers, outputs, warnings and the caution."""
    land = manifest["landscape"]
    lines = [
        "# landflow run report", "",
        f"landflow {manifest['landflow_version']}; study file: {manifest['study_file'] or '(from Python)'}", "",
        "## Caution", "", caution, "",
        "## Landscape", "",
        f"- {land['rows']} x {land['cols']} cells of {land['cell_size'][0]:g} x {land['cell_size'][1]:g} map units"
        + (f" (about {land['cell_size_metres'][0]:.4g} x {land['cell_size_metres'][1]:.4g} m mid-grid)"
           if land.get("geographic") else "") + f", CRS {land['crs'] or 'none'}",
        f"- values read per {manifest['settings']['landscape'].get('values_per', 'length')}: effective resistance "
        + ("scales with the cell size (docs/method.md, 'Units and resolution')"
           if manifest['settings']['landscape'].get('values_per', 'length') == 'length'
           else "does not depend on the cell size (resistance per square of a sheet)"),
        f"- {land['cells']:,} cells in the landscape, {len(land['patches'])} patches, {land['pieces']} connected piece(s)",
    ]
    for solver in manifest["solvers"]:
        lines.append(f"- solver for {solver.get('purpose', 'the run')}: {solver['method']}, {solver['unknowns']:,} unknowns, "
                     f"{solver['right_hand_sides']} right-hand sides, worst relative residual "
                     f"{solver['worst_relative_residual']:.1e}")
    if manifest.get("summary"):
        lines += ["", "## Key numbers", ""] + [f"- {k}: {v}" for k, v in manifest["summary"].items()]
    lines += ["", "## Outputs", "", "| file | what it holds | units |", "|---|---|---|"]
    lines += [f"| {o['file']} | {o['description']} | {o['units']} |" for o in manifest["outputs"]]
    if manifest["warnings"]:
        lines += ["", "## Warnings", ""] + [f"- {w}" for w in manifest["warnings"]]
    lines += ["", f"Total time: {manifest['timings_seconds']['total']:.1f} s. "
              "manifest.json holds the settings, input hashes and versions needed to rerun this study.", ""]
    with atomic_path(path) as tmp:
        tmp.write_text("\n".join(lines), encoding="utf-8")
