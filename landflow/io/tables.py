"""Write tables as CSV, atomically and with full float precision."""

import pandas as pd

from ._atomic import atomic_path

__all__ = ["write_csv"]


def write_csv(path, table, *, index=False):
    """Write a DataFrame as UTF-8 CSV with round-trip float precision (``%.17g``)."""
    table = pd.DataFrame(table)
    with atomic_path(path) as tmp:
        table.to_csv(tmp, index=index, float_format="%.17g", lineterminator="\n")
