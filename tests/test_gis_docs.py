"""The notebook example of docs/gis.md runs, and prints what the page says it prints."""

import contextlib
import io
import re
from pathlib import Path

import numpy as np

import landflow as lf

DOC = Path(__file__).resolve().parents[1] / "docs" / "gis.md"


def test_the_notebook_example_runs_and_agrees_with_the_api():
    text = DOC.read_text(encoding="utf-8")
    code = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert len(code) == 1
    out = io.StringIO()
    namespace = {}
    with contextlib.redirect_stdout(out):
        exec(compile(code[0], str(DOC), "exec"), namespace)
    printed = out.getvalue().splitlines()
    promised = re.search(r"```text\n(.*?)```", text, flags=re.S).group(1).splitlines()
    assert printed == promised
    table, patches, grid = namespace["table"], namespace["patches"], namespace["grid"]
    assert len(table) == 3 and set(table["from"]) | set(table["to"]) == {"Mill pond", "Ash pond", "Lark pond"}
    # the same numbers from the plain API on the same cells
    graph = lf.build_graph(lf.Grid.from_array(grid.values, cell_size=25.0), patches.labels)
    np.testing.assert_allclose(table.resistance, lf.resistance_table(lf.patch_voltages(graph)).resistance,
                               rtol=1e-12)
