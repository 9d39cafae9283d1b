"""Per subject x structure result cache, so an interrupted study resumes where it stopped.

Each finished item is one JSON file ``<OUTDIR>/.cache/<key[:2]>/<key>.json``, written
atomically (temporary file + rename, :mod:`shapedesc.io.atomic`), so after any
interruption, even ``kill -9``, an entry is either complete or absent.  The key is the
SHA-256 of the input file's content, the item (subject, structure, label), the run
parameters, the package version and :data:`CACHE_FORMAT`: a changed input, option or
version never reuses a stale result.  The entry holds the table rows as JSON numbers (exact round trip of
float64, Python's ``repr``) and the coefficient file's bytes, so the tables and
``coefficients/`` are rebuilt from the cache byte for byte.
"""

from __future__ import annotations

import base64
import hashlib
import json
from pathlib import Path

from shapedesc.io.atomic import write_text_atomic

__all__ = ["sha256_file", "item_key", "ResultCache", "CACHE_DIRNAME", "CACHE_FORMAT"]

#: Name of the cache folder inside OUTDIR.
CACHE_DIRNAME = ".cache"
#: Version of what an entry holds, part of every key.  2: coefficients stored exactly as
#: computed (format 1 rounded them to a 2^-40 relative grid) and per-stage timings;
#: 3: inputs named as the user gave them in messages and coefficient files.
CACHE_FORMAT = 3
_CHUNK = 1 << 20


def sha256_file(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes (read in 1 MiB chunks)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(_CHUNK), b""):
            h.update(chunk)
    return h.hexdigest()


def item_key(*, input_sha256: str, subject: str, structure: str, kind: str,
             label: int | None, parameters: dict, version: str) -> str:
    """Cache key of one item: SHA-256 of a canonical JSON of everything that shapes its result."""
    blob = json.dumps({"input_sha256": input_sha256, "subject": subject,
                       "structure": structure, "kind": kind, "label": label,
                       "parameters": parameters, "version": version,
                       "cache_format": CACHE_FORMAT},
                      sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(blob.encode("utf-8")).hexdigest()


class ResultCache:
    """The cache folder of one OUTDIR.

    Parameters
    ----------
    root : path
        ``<OUTDIR>/.cache``.
    """

    def __init__(self, root: str | Path):
        self.root = Path(root)

    def _path(self, key: str) -> Path:
        return self.root / key[:2] / f"{key}.json"

    def get(self, key: str) -> dict | None:
        """The stored entry, or None when absent or unreadable (then it is recomputed)."""
        p = self._path(key)
        try:
            entry = json.loads(p.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None
        if not isinstance(entry, dict) or entry.get("key") != key:
            return None
        return entry

    def put(self, key: str, entry: dict) -> None:
        """Store ``entry`` (a JSON-able dict; ``files`` values are bytes) atomically."""
        stored = dict(entry)
        stored["key"] = key
        stored["files"] = {name: base64.b64encode(data).decode("ascii")
                           for name, data in sorted(entry.get("files", {}).items())}
        # Not sort_keys: the rows' key order is the tables' column order.
        write_text_atomic(self._path(key), json.dumps(stored, allow_nan=True))

    @staticmethod
    def files(entry: dict) -> dict[str, bytes]:
        """The coefficient files of an entry (suffix -> bytes)."""
        return {name: base64.b64decode(data) for name, data in entry.get("files", {}).items()}

    def __contains__(self, key: str) -> bool:
        return self.get(key) is not None
