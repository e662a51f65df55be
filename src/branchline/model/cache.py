"""The model cache: generated code of expression models, kept between runs.

Where: the ``models/`` folder of the user cache folder
(:func:`branchline.user_cache.cache_folder`: ``$BRANCHLINE_CACHE_DIR``, else
``$XDG_CACHE_HOME/branchline``, else ``~/.cache/branchline``), one JSON file per block of generated
code, named by the model's key and the block's name.

The key is a SHA-256 hash of the model text (state, parameter, definition and
observable names and expressions, in order; default values do not enter the
code and are not part of it), branchline's version and the code format
:data:`CODE_FORMAT`. A changed equation is a different key, so a stale entry
is never used; old entries are simply never read again.

Safety: an entry holds only source text that branchline generated and index
arrays. Reading one back never runs it as it is: every source passes the
whitelist check of :func:`branchline.model.safe_code.compile_checked`
(arithmetic on the arguments and the math/numpy functions of expressions,
nothing else) before it is compiled, exactly as freshly generated code does.
Entries are also ignored (and rebuilt) when they are damaged (bad JSON, a
checksum that does not match, wrong index arrays), written for another
version or key, not owned by the current user, or writable by others. Files
are written atomically (a private temporary file, then ``os.replace``), so
runs in parallel never read a half-written entry; folders are created
private (mode 0700).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from branchline.model.codegen import BlockRecord
from branchline.user_cache import cache_folder, read_document, text_key, write_document

#: Bumped whenever generated code or the entry layout changes meaning.
CODE_FORMAT = 1


def model_key(spec: object) -> str:
    """SHA-256 of the model text (names and expressions, in order), version and format."""
    return text_key(
        {
            "format": CODE_FORMAT,
            "parameters": list(spec.parameters),
            "equations": list(spec.equations.items()),
            "definitions": list(spec.definitions.items()),
            "observables": list(spec.observables.items()),
        }
    )


class ModelCache:
    """Blocks of generated code of one model, read and written under its key."""

    def __init__(self, key: str, folder: Path | None = None) -> None:
        self.key = key
        root = cache_folder() if folder is None else folder
        self.folder = None if root is None else root / "models"

    def _path(self, block: str) -> Path:
        return self.folder / f"{self.key}.{block}.json"

    def load(self, block: str, width: int, limits: tuple[int, ...]) -> BlockRecord | None:
        """The cached block, or None if absent or unusable in any way.

        ``width`` is the length of its index tuples and ``limits`` the bound of
        each index column (an index must be >= 0 and below its bound).
        """
        if self.folder is None:
            return None
        body = read_document(self._path(block))
        if body is None:
            return None
        try:
            return _record(body, self.key, block, width, limits)
        except (ValueError, TypeError, KeyError, OverflowError):
            return None

    def save(self, block: str, record: BlockRecord) -> None:
        """Write the block atomically (skipped silently if the cache cannot be written)."""
        if self.folder is None:
            return
        body = {
            "block": block,
            "key": self.key,
            "indices": record.indices.tolist(),
            "fast": record.fast,
            "safe": record.safe,
        }
        write_document(self._path(block), body)


def clear(spec: object) -> None:
    """Remove every cached block of this model (benchmarks start from an empty cache)."""
    cache = ModelCache(model_key(spec))
    if cache.folder is None or not cache.folder.is_dir():
        return
    for path in cache.folder.glob(f"{cache.key}.*.json"):
        path.unlink(missing_ok=True)


def _record(
    body: dict, key: str, block: str, width: int, limits: tuple[int, ...]
) -> BlockRecord | None:
    if body["key"] != key or body["block"] != block:
        return None
    fast, safe = body["fast"], body["safe"]
    if not isinstance(safe, str) or not (fast is None or isinstance(fast, str)):
        return None
    indices = np.array(body["indices"], dtype=np.int64).reshape(-1, width)
    if indices.size and (np.any(indices < 0) or np.any(indices >= np.array(limits))):
        return None
    return BlockRecord(indices=indices, fast=fast, safe=safe)


__all__ = ["CODE_FORMAT", "ModelCache", "clear", "model_key"]
