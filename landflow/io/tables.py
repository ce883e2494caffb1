"""Read CSV tables of inputs as text; write tables as CSV, atomically and with full float precision."""

import pandas as pd

from ..errors import InputError
from ._atomic import atomic_path

__all__ = ["read_csv_text", "write_csv"]


def read_csv_text(path, what):
    """A CSV input (points, an edge list, a node table) as a table of stripped text, for checks cell by cell.

    Column names and values lose surrounding spaces ("x, y, id" reads as "x,y,id"); nothing is
    read as missing, so a blank stays "" and can be named in a message. ``what`` names the table in
    messages ("edge list").
    """
    try:
        table = pd.read_csv(path, skipinitialspace=True, dtype=str, keep_default_na=False)
    except FileNotFoundError:
        raise InputError(f"the {what} '{path}' does not exist. Check the path (relative paths in a study are "
                         "relative to the study file).") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the {what} as CSV ({str(exc).strip()}).") from None
    table.columns = [str(c).strip() for c in table.columns]
    return table.apply(lambda col: col.str.strip())


def write_csv(path, table, *, index=False):
    """Write a DataFrame as UTF-8 CSV with round-trip float precision (``%.17g``)."""
    table = pd.DataFrame(table)
    with atomic_path(path) as tmp:
        table.to_csv(tmp, index=index, float_format="%.17g", lineterminator="\n")
