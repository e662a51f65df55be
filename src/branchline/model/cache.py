"""The model cache: generated code of expression models, kept between runs.

Where: ``$BRANCHLINE_CACHE_DIR`` if set (the value ``off`` turns the cache
off), else ``$XDG_CACHE_HOME/branchline``, else ``~/.cache/branchline``;
entries live in its ``models/`` folder, one JSON file per block of generated
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

import hashlib
import json
import os
import stat
import tempfile
from pathlib import Path

import numpy as np

from branchline.model.codegen import BlockRecord

#: Bumped whenever generated code or the entry layout changes meaning.
CODE_FORMAT = 1
#: Environment variable naming the cache folder (``off`` turns the cache off).
CACHE_VARIABLE = "BRANCHLINE_CACHE_DIR"
# Entries above this size are not read (a 1,000-state model's largest block is
# well under a megabyte); a foreign or damaged file could be anything.
MAX_ENTRY_BYTES = 64_000_000


def cache_folder() -> Path | None:
    """The folder of the model cache, or None when the cache is off."""
    chosen = os.environ.get(CACHE_VARIABLE)
    if chosen is not None:
        if chosen.strip().lower() in ("", "off", "0", "no", "false"):
            return None
        return Path(chosen).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "branchline"


def model_key(spec: object) -> str:
    """SHA-256 of the model text (names and expressions, in order), version and format."""
    from branchline import __version__

    text = {
        "format": CODE_FORMAT,
        "branchline": __version__,
        "parameters": list(spec.parameters),
        "equations": list(spec.equations.items()),
        "definitions": list(spec.definitions.items()),
        "observables": list(spec.observables.items()),
    }
    encoded = json.dumps(text, sort_keys=True, ensure_ascii=True).encode()
    return hashlib.sha256(encoded).hexdigest()


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
        try:
            path = self._path(block)
            if not _trusted(path):
                return None
            payload = json.loads(path.read_bytes())
            return _record(payload, self.key, block, width, limits)
        except (OSError, ValueError, TypeError, KeyError, OverflowError):
            return None

    def save(self, block: str, record: BlockRecord) -> None:
        """Write the block atomically; a cache that cannot be written is skipped silently."""
        if self.folder is None:
            return
        body = {
            "block": block,
            "key": self.key,
            "indices": record.indices.tolist(),
            "fast": record.fast,
            "safe": record.safe,
        }
        payload = {"checksum": _checksum(body), **body}
        try:
            self.folder.mkdir(mode=0o700, parents=True, exist_ok=True)
            handle, temporary = tempfile.mkstemp(dir=self.folder, suffix=".part")
            try:
                with os.fdopen(handle, "w", encoding="ascii") as stream:
                    json.dump(payload, stream)
                os.replace(temporary, self._path(block))
            except BaseException:
                Path(temporary).unlink(missing_ok=True)
                raise
        except OSError:
            return


def clear(spec: object) -> None:
    """Remove every cached block of this model (benchmarks start from an empty cache)."""
    cache = ModelCache(model_key(spec))
    if cache.folder is None or not cache.folder.is_dir():
        return
    for path in cache.folder.glob(f"{cache.key}.*.json"):
        path.unlink(missing_ok=True)


def _checksum(body: dict) -> str:
    return hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()


def _trusted(path: Path) -> bool:
    """A regular file of ours, not writable by others, of a sane size."""
    info = path.stat()
    if not stat.S_ISREG(info.st_mode) or info.st_size > MAX_ENTRY_BYTES:
        return False
    if hasattr(os, "getuid"):
        if info.st_uid != os.getuid() or info.st_mode & (stat.S_IWGRP | stat.S_IWOTH):
            return False
    return True


def _record(
    payload: dict, key: str, block: str, width: int, limits: tuple[int, ...]
) -> BlockRecord | None:
    body = {name: payload[name] for name in ("block", "key", "indices", "fast", "safe")}
    if payload.get("checksum") != _checksum(body) or body["key"] != key or body["block"] != block:
        return None
    fast, safe = body["fast"], body["safe"]
    if not isinstance(safe, str) or not (fast is None or isinstance(fast, str)):
        return None
    indices = np.array(body["indices"], dtype=np.int64).reshape(-1, width)
    if indices.size and (np.any(indices < 0) or np.any(indices >= np.array(limits))):
        return None
    return BlockRecord(indices=indices, fast=fast, safe=safe)


__all__ = ["CACHE_VARIABLE", "CODE_FORMAT", "ModelCache", "cache_folder", "clear", "model_key"]
