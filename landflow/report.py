"""The run's reports: ``report.md`` (plain text) and ``report.html`` (one self-contained page).

Both are built from ``manifest.json`` and the output files alone, so
:func:`rebuild_reports` can remake them for a finished output folder without
solving anything. The page embeds every picture (maps as PNG data, charts as
inline SVG), needs no network, reads on a phone and prints on A4.
"""

from __future__ import annotations

import base64
import json
import re
from pathlib import Path

import numpy as np

from .errors import InputError
from .io._atomic import atomic_path, sha256_of

__all__ = ["write_report", "write_reports", "build_html", "rebuild_reports", "network_words", "REPORT_FILES"]

REPORT_FILES = ("report.md", "report.html")

_DESCRIPTIONS = {"report.md": "a plain-text account of the run", "report.html": "the run's report as one web page"}


# -- plain text --------------------------------------------------------------------------------------------
def write_report(path, manifest, caution=None):
    """A short Markdown account of a run: inputs, key numbers with units, outputs, warnings and the caution."""
    caution = caution or manifest.get("caution", "")
    lines = [
        "# landflow run report", "",
        f"landflow {manifest['landflow_version']}; study file: {manifest['study_file'] or '(from Python)'}", "",
        "## Caution", "", caution, "",
        *_landscape_lines(manifest),
    ]
    for solver in manifest["solvers"]:
        lines.append(f"- solver for {solver.get('purpose', 'the run')}: {solver['method']}, {solver['unknowns']:,} unknowns, "
                     f"{solver['right_hand_sides']} right-hand sides, worst relative residual "
                     f"{solver['worst_relative_residual']:.1e} (1: relative to the right-hand side)")
    if manifest.get("summary"):
        lines += ["", "## Key numbers", ""] + [f"- {k}: {v}" for k, v in manifest["summary"].items()]
    lines += ["", "## Outputs", "", "| file | what it holds | units |", "|---|---|---|"]
    lines += [f"| {o['file']} | {o['description']} | {o['units']} |" for o in manifest["outputs"]
              if o["file"] not in REPORT_FILES]
    lines += [f"| {name} | {_DESCRIPTIONS[name]} | |" for name in REPORT_FILES]
    if manifest["warnings"]:
        lines += ["", "## Warnings", ""] + [f"- {w}" for w in manifest["warnings"]]
    lines += ["", f"Total time: {manifest['timings_seconds']['total']:.1f} s. "
              "manifest.json holds the settings, input hashes and versions needed to rerun this study.", ""]
    with atomic_path(path) as tmp:
        tmp.write_text("\n".join(lines), encoding="utf-8")


def _landscape_lines(manifest):
    """The report's account of the landscape (a raster's cells, or a network's nodes and edges)."""
    land = manifest["landscape"]
    if land.get("network"):
        zones = list((land.get("patch_names") or {}).values()) or land["patches"]
        return ["## Network", "",
                f"- {land['network_nodes']:,} nodes and {land['network_edges']:,} edges from {land['source']}, "
                f"CRS {land['crs'] or 'none'}",
                f"- {len(land['patches'])} zones ({', '.join(map(str, zones))}), {land['pieces']} connected piece(s); "
                "effective resistance is in the edges' own resistance unit"]
    return ["## Landscape", "",
            f"- {land['rows']} x {land['cols']} cells of {land['cell_size'][0]:g} x {land['cell_size'][1]:g} map units"
            + (f" (about {land['cell_size_metres'][0]:.4g} x {land['cell_size_metres'][1]:.4g} m mid-grid)"
               if land.get("geographic") else "") + f", CRS {land['crs'] or 'none'}",
            f"- values read per {manifest['settings']['landscape'].get('values_per', 'length')}: effective resistance "
            + ("scales with the cell size (docs/method.md, 'Units and resolution')"
               if manifest['settings']['landscape'].get('values_per', 'length') == 'length'
               else "does not depend on the cell size (resistance per square of a sheet)"),
            f"- {land['cells']:,} cells in the landscape, {len(land['patches'])} patches, {land['pieces']} connected "
            "piece(s)"]


def write_reports(folder, manifest):
    """Write ``report.md`` and ``report.html`` into ``folder`` and list them, with hashes, in ``manifest``."""
    folder = Path(folder)
    manifest["outputs"] = [o for o in manifest["outputs"] if o["file"] not in REPORT_FILES]
    write_report(folder / "report.md", manifest)
    page = build_html(folder, manifest)
    with atomic_path(folder / "report.html") as tmp:
        tmp.write_text(page, encoding="utf-8")
    for name in REPORT_FILES:
        manifest["outputs"].append({"file": name, "description": _DESCRIPTIONS[name], "units": "",
                                    "sha256": sha256_of(folder / name)})
    return folder / "report.html"


def rebuild_reports(folder):
    """Remake ``report.md`` and ``report.html`` of a finished output folder from its manifest and outputs.

    Nothing is solved. The manifest's entries for the two reports are updated
    (hashes), and the manifest is rewritten atomically.

    Raises
    ------
    InputError
        The folder holds no landflow ``manifest.json``.
    """
    from .study.folder import is_landflow_manifest
    folder = Path(folder).resolve()
    path = folder / "manifest.json"
    if not is_landflow_manifest(path):
        raise InputError(f"{folder}: no landflow manifest.json there; give the output folder of a finished run "
                         "(the folder named by [output] folder in the study file).")
    from .study.folder import OutputFolder
    # the folder's lock: no run may replace the outputs while the reports are remade from them
    with OutputFolder(folder, stage=False, source=str(folder)):
        manifest = json.loads(path.read_text(encoding="utf-8"))
        page = write_reports(folder, manifest)
        with atomic_path(path) as tmp:
            tmp.write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    return page


# -- the web page ------------------------------------------------------------------------------------------
_ANALYSIS_TITLES = {
    "effective_resistance": "Effective resistance between patches",
    "current_density": "Current density",
    "corridor_ranking": "Links ranked by their share of connectivity",
    "corridor_maps": "Corridors and pinch points",
    "edge_criticality": "The network edges whose loss costs most",
    "restoration_gain": "Where restoration helps most",
    "scenario_change": "What-if: the changed landscape",
    "least_cost_paths": "Least-cost paths",
    "hitting_probability": "Which patch a walker reaches first (two patches)",
    "absorption_probability": "First patch reached, and death on the way",
    "arrival_probability": "Arrival between patches",
    "expected_steps": "Expected steps until arrival",
    "expected_visits": "Expected visits",
    "walk_simulation": "Simulated walkers against the exact values",
}


_NETWORK_WORDS = {"patch": "zone", "patches": "zones", "Patch": "Zone", "Patches": "Zones",
                  "landscape": "network"}


def network_words(text):
    """A title or caption in a network study's words: zones for patches, the network for the landscape."""
    return re.sub(r"\b(" + "|".join(_NETWORK_WORDS) + r")\b", lambda m: _NETWORK_WORDS[m.group(1)], text)


def _read_csv(folder, manifest, name):
    import pandas as pd
    if not any(o["file"] == name for o in manifest["outputs"]) or not (folder / name).is_file():
        return None
    return pd.read_csv(folder / name)


def _data_uri(path):
    return "data:image/png;base64," + base64.b64encode(Path(path).read_bytes()).decode("ascii")


def _pair_name(a, b):
    return f"{int(a)}–{int(b)}"


def _pair_table(folder, manifest):
    """Columns (name, units, kind) and rows of the pair table, merged from whichever pair tables the run wrote."""
    from .maps.charts import number_text
    pieces = [
        ("effective_resistance.csv", [("resistance", "effective resistance", "resistance x map unit"),
                                      ("commute_time", "commute time", "steps")]),
        ("least_cost_distance.csv", [("least_cost_distance", "least-cost distance", "resistance x map unit"),
                                     ("path_length", "route length", "map units")]),
        ("corridor_ranking.csv", [("rank", "link rank", "1 = most important"),
                                  ("connectivity_drop_share", "connectivity lost without the link", "%")]),
        ("scenario_change.csv", [("resistance_change_percent", "what-if change of resistance", "%")]),
    ]
    table, columns = None, []
    for name, wanted in pieces:
        frame = _read_csv(folder, manifest, name)
        if frame is None:
            continue
        keep = [c for c, _, _ in wanted if c in frame.columns and c not in (table.columns if table is not None else [])]
        if not keep:
            continue
        part = frame[["patch_a", "patch_b", *keep]].copy()
        if "connectivity_drop_share" in keep:
            part["connectivity_drop_share"] *= 100
        table = part if table is None else table.merge(part, on=["patch_a", "patch_b"], how="outer")
        columns += [(c, label, units) for c, label, units in wanted if c in keep]
    if table is None:
        return [], []
    rows = []
    for record in table.to_dict("records"):
        cells = [{"text": str(int(record["patch_a"])), "value": int(record["patch_a"])},
                 {"text": str(int(record["patch_b"])), "value": int(record["patch_b"])}]
        for c, _, _ in columns:
            v = record.get(c)
            v = float(v) if v is not None else float("nan")
            cells.append({"text": str(int(v)) if c == "rank" and np.isfinite(v) else number_text(v),
                          "value": v if np.isfinite(v) else ("Infinity" if v > 0 else "")})
        rows.append(cells)
    header = [("patch_a", "patch A", ""), ("patch_b", "patch B", "")] + columns
    return header, rows


def _charts(folder, manifest):
    """SVG charts per analysis name: [(title, caption, svg)]."""
    from .maps import charts
    out = {}
    matrix = _read_csv(folder, manifest, "effective_resistance_matrix.csv")
    if matrix is not None and len(matrix) >= 2:
        first = matrix.columns[0]          # "patch", or "patch_name" where patches have text ids
        ids = [str(int(v)) if isinstance(v, (int, np.integer)) or (isinstance(v, float) and v.is_integer())
               else str(v) for v in matrix[first]]
        values = matrix.drop(columns=first).to_numpy(dtype=float)
        order = charts.cluster_order(values)
        shown = values[np.ix_(order, order)]
        np.fill_diagonal(shown, np.nan)
        out.setdefault("effective_resistance", []).append((
            "Pair matrix, ordered by clustering",
            "Effective resistance of every pair; rows and columns ordered by average-linkage clustering so that "
            "groups of well-connected patches sit together. Hover a cell for its value.",
            charts.heat_map(shown, [ids[i] for i in order], [ids[i] for i in order], units="resistance x map unit",
                            xlabel="patch", ylabel="patch", name="pair-matrix")))
    lcd = _read_csv(folder, manifest, "least_cost_distance.csv")
    if lcd is not None and "effective_resistance" in lcd.columns and len(lcd):
        out.setdefault("least_cost_paths", []).append((
            "Effective resistance against least-cost distance",
            "One point per pair (log axes). Pairs far above the trend have one good route but few alternatives; "
            "pairs below it are joined by many routes. Hover a point to name its pair.",
            charts.pair_scatter(lcd["least_cost_distance"], lcd["effective_resistance"],
                                [f"patches {_pair_name(a, b)}" for a, b in zip(lcd["patch_a"], lcd["patch_b"])],
                                xlabel="least-cost distance (resistance x map unit)",
                                ylabel="effective resistance (resistance x map unit)")))
    ranking = _read_csv(folder, manifest, "corridor_ranking.csv")
    if ranking is not None and len(ranking):
        top = ranking.sort_values("rank").head(15)
        out.setdefault("corridor_ranking", []).append((
            "The links that matter most",
            f"Share of overall connectivity lost if the direct link of a pair were lost; the {len(top)} "
            "highest-ranked links of the run.",
            charts.ranked_bars([f"{_pair_name(a, b)}" for a, b in zip(top["patch_a"], top["patch_b"])],
                               100 * top["connectivity_drop_share"], xlabel="connectivity lost (%)",
                               name="ranking")))
    arrival = _read_csv(folder, manifest, "arrival_probability.csv")
    if arrival is not None and len(arrival):
        outcome = [str(int(p)) if o == "arrival" else "death" for o, p in
                   zip(arrival["outcome"], arrival["arrival_patch"].fillna(-1))]
        arrival = arrival.assign(to=outcome)
        grid = arrival.pivot_table(index="release_patch", columns="to", values="probability", aggfunc="sum")
        cols = sorted([c for c in grid.columns if c != "death"], key=int) + (["death"] if "death" in grid.columns else [])
        grid = grid[cols]
        out.setdefault("arrival_probability", []).append((
            "Arrival table",
            "Probability that a walker released from a patch (row) first arrives at another patch (column) or "
            "dies on the way (log colour scale).",
            charts.heat_map(grid.to_numpy(dtype=float), [str(int(v)) for v in grid.index], cols,
                            units="probability", xlabel="arrives at", ylabel="released from", name="arrival",
                            log=True, cmap=style_probability())))
    simulated = _read_csv(folder, manifest, "walk_simulation_arrival.csv")
    walkers = _read_csv(folder, manifest, "walk_simulation_steps.csv")
    if simulated is not None and len(simulated):
        # the binomial standard error of the exact probability for the number of walkers released: unlike the
        # simulated share's own, it is not 0 when no walker happened to take a rare outcome
        error = simulated["standard_error"].to_numpy(dtype=float)
        if walkers is not None and {"release_patch", "walkers"} <= set(walkers.columns):
            count = simulated["release_patch"].map(dict(zip(walkers["release_patch"], walkers["walkers"])))
            p = simulated["exact_probability"].to_numpy(dtype=float)
            error = np.sqrt(p * (1 - p) / count.to_numpy(dtype=float))
        labels = [f"{int(r)}→{int(p)}" if o == "arrival" else f"{int(r)}→death" for r, o, p in
                  zip(simulated["release_patch"], simulated["outcome"], simulated["arrival_patch"].fillna(-1))]
        out.setdefault("walk_simulation", []).append((
            "Simulation against exact values",
            "Share of simulated walkers for each release patch and outcome minus the exact probability from the "
            "linear solve, with 95% intervals (1.96 binomial standard errors of the exact probability for the "
            "number of walkers released); about 19 in 20 should cross zero. Hover a point for both values.",
            charts.estimates_with_errors(labels, simulated["simulated_probability"], error,
                                         simulated["exact_probability"],
                                         ylabel="simulated minus exact probability",
                                         name="simulation")))
    return out


def _derived_numbers(folder, manifest):
    """Key numbers per analysis read back from its tables (with units), for analyses that record none."""
    from .maps.charts import number_text
    out = {}
    lcd = _read_csv(folder, manifest, "least_cost_distance.csv")
    if lcd is not None and len(lcd):
        d = lcd["least_cost_distance"].to_numpy(dtype=float)
        d = d[np.isfinite(d)]
        if d.size:
            out.setdefault("least_cost_paths", []).append((
                "least-cost distance (min / median / max)",
                f"{number_text(d.min())} / {number_text(np.median(d))} / {number_text(d.max())} resistance x map unit"))
    gain = _read_csv(folder, manifest, "restoration_gain_cells.csv")
    if gain is not None and len(gain):
        top = gain.iloc[0]
        units = next((o["units"] for o in manifest["outputs"] if o["file"] == "restoration_gain.tif"), "")
        out.setdefault("restoration_gain", []).append((
            "cell where lowering resistance helps most",
            f"x {number_text(top['x'])}, y {number_text(top['y'])} (map units): gain {number_text(top['gain'])} {units}"))
    steps = _read_csv(folder, manifest, "expected_steps_from_patch.csv")
    if steps is not None and len(steps) and "expected_steps" in steps.columns:
        s = steps["expected_steps"].to_numpy(dtype=float)
        out.setdefault("expected_steps", []).append((
            "expected steps from a patch until arrival or death (min / max)",
            f"{number_text(s.min())} / {number_text(s.max())} steps"))
    change = _read_csv(folder, manifest, "scenario_change.csv")
    if change is not None and len(change) and "resistance_change_percent" in change.columns:
        row = change.loc[change["resistance_change_percent"].abs().idxmax()]
        out.setdefault("scenario_change", []).append((
            "pair whose effective resistance changes most",
            f"patches {_pair_name(row['patch_a'], row['patch_b'])}: {row['resistance_change_percent']:+.2f}% "
            f"({number_text(row['resistance_before'])} to {number_text(row['resistance_after'])} "
            "resistance x map unit)"))
    return out


def style_probability():
    from .maps import style
    return style.PROBABILITY


def build_html(folder, manifest):
    """The report page of an output folder as HTML text (see the module docstring)."""
    import jinja2
    from .maps import charts, style
    folder = Path(folder)
    land = manifest["landscape"]
    words = network_words if land.get("network") else str
    settings = manifest.get("settings", {})
    names = list(settings.get("analyses", {}).keys())
    charts_by = _charts(folder, manifest)
    derived = _derived_numbers(folder, manifest)
    summary = manifest.get("summary", {})
    by_analysis = manifest.get("summary_by_analysis") or {}
    sections = []
    for name in names:
        outputs = [o for o in manifest["outputs"] if o.get("analysis") == name]
        maps = [{"src": _data_uri(folder / o["file"]),
                 "caption": words(o["description"].removeprefix("quick-look picture: ")),
                 "file": o["file"], "units": o["units"]}
                for o in outputs if o["file"].endswith(".png") and (folder / o["file"]).is_file()]
        sections.append({"id": name, "title": words(_ANALYSIS_TITLES.get(name, name.replace("_", " ").capitalize())),
                         "numbers": [(words(k), words(str(summary[k]))) for k in by_analysis.get(name, [])
                                     if k in summary]
                         + derived.get(name, []),
                         "maps": maps, "charts": charts_by.get(name, []),
                         "files": [{**o, "description": words(o["description"])} for o in outputs
                                   if not o["file"].endswith(".png")]})
    loose = [o for o in manifest["outputs"] if "analysis" not in o and o["file"].endswith(".png")
             and (folder / o["file"]).is_file()]
    if loose:  # a manifest from before outputs named their analysis
        sections.append({"id": "maps", "title": "Maps", "numbers": [], "charts": [], "files": [],
                         "maps": [{"src": _data_uri(folder / o["file"]), "file": o["file"], "units": o["units"],
                                   "caption": o["description"].removeprefix("quick-look picture: ")} for o in loose]})
    headline = None
    pictures = [m for section in sections for m in section["maps"]]
    for wanted in ("current_density.png", "corridor_overlap.png", "least_cost_paths.png"):
        headline = headline or next((m for m in pictures if m["file"] == wanted), None)
    headline = headline or (pictures[0] if pictures else None)
    header, rows = _pair_table(folder, manifest)
    ranking = _read_csv(folder, manifest, "corridor_ranking.csv")
    ranked = [] if ranking is None else [
        {"rank": int(r["rank"]), "pair": _pair_name(r["patch_a"], r["patch_b"]),
         "drop": 100 * float(r["connectivity_drop_share"]), "resistance": float(r["effective_resistance"])}
        for r in ranking.sort_values("rank").head(10).to_dict("records")]
    stages = manifest.get("stages") or _stages_from_timings(manifest.get("timings_seconds", {}))
    environment = jinja2.Environment(loader=jinja2.PackageLoader("landflow", "templates"),
                                     autoescape=jinja2.select_autoescape(["html", "j2"]),
                                     undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    template = environment.get_template("report.html.j2")
    return template.render(
        manifest=manifest, land=land, page=style.PAGE, caution=manifest.get("caution", ""),
        inputs=manifest.get("inputs", []), versions=manifest.get("versions", {}),
        settings_text=json.dumps(settings, indent=2, default=str), solvers=manifest.get("solvers", []),
        sections=sections, headline=headline,
        key_numbers=[(words(k), words(str(v))) for k, v in summary.items()],
        pair_header=header, pair_rows=rows, ranked=ranked, warnings=manifest.get("warnings", []),
        timeline=charts.timeline(stages) if stages else None,
        outputs=[{**o, "description": words(o["description"])} for o in manifest["outputs"]],
        total=manifest.get("timings_seconds", {}).get("total"))


def _stages_from_timings(timings):
    """Stages laid end to end from the per-stage seconds (manifests written before stages were recorded)."""
    stages, t = [], 0.0
    for name, seconds in timings.items():
        if name == "total":
            continue
        stages.append({"stage": name, "start": t, "end": t + seconds})
        t += seconds
    return stages
