"""Write files so that a failure never leaves a half-written one under the final name; hash files."""

import contextlib
import hashlib
import os
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary name beside ``path``; rename it to ``path`` only on success.

    The temporary name keeps the file's extension (``.map_layers.partial-PID.gpkg``), which drivers
    such as GDAL's GeoPackage writer check.
    """
    path = Path(path)
    tmp = path.with_name(f".{path.stem}.partial-{os.getpid()}{path.suffix}")
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def sha256_of(path):
    """The SHA-256 of a file's bytes as hex, read in 1 MB chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()
