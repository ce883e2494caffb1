"""Write files so that a failure never leaves a half-written one under the final name."""

import contextlib
import os
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary name beside ``path``; rename it to ``path`` only on success."""
    path = Path(path)
    tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
