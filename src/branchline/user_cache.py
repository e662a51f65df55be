"""The user cache folder: where branchline keeps what it can reuse between runs.

``$BRANCHLINE_CACHE_DIR`` if set (``off`` turns caching off), else
``$XDG_CACHE_HOME/branchline``, else ``~/.cache/branchline``. Two things live
there: generated model code (``models/``, :mod:`branchline.model.cache`) and
the names each expression of a model text uses (``checked/``, written by the
scan loader after the whitelisting parser accepted the text, so a model seen
before is loaded without sympy).

Every file is a JSON document with a SHA-256 checksum of its content, written
atomically (a private temporary file, then ``os.replace``) into folders made
private (mode 0700), and read back only if it is a regular file of the current
user that nobody else may write, of a sane size, whose checksum matches;
anything else is ignored (and written again). What reading a file may cause
is limited by its users: see :mod:`branchline.model.cache`.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
import tempfile
from pathlib import Path
from typing import Any

#: Environment variable naming the cache folder (``off`` turns the cache off).
CACHE_VARIABLE = "BRANCHLINE_CACHE_DIR"
# Files above this size are not read (a 1,000-state model's largest block of
# code is well under a megabyte); a foreign or damaged file could be anything.
MAX_FILE_BYTES = 64_000_000


def cache_folder() -> Path | None:
    """The cache folder, or None when caching is off."""
    chosen = os.environ.get(CACHE_VARIABLE)
    if chosen is not None:
        if chosen.strip().lower() in ("", "off", "0", "no", "false"):
            return None
        return Path(chosen).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "branchline"


def text_key(content: object) -> str:
    """SHA-256 (hex) of ``content`` as canonical JSON, with branchline's version."""
    from branchline import __version__

    encoded = json.dumps([__version__, content], sort_keys=True, ensure_ascii=True).encode()
    return hashlib.sha256(encoded).hexdigest()


def checksum(body: dict) -> str:
    return hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()


def read_document(path: Path) -> dict | None:
    """The JSON body stored at ``path``, or None if absent, untrusted or damaged."""
    try:
        info = path.stat()
        if not stat.S_ISREG(info.st_mode) or info.st_size > MAX_FILE_BYTES:
            return None
        if hasattr(os, "getuid") and (
            info.st_uid != os.getuid() or info.st_mode & (stat.S_IWGRP | stat.S_IWOTH)
        ):
            return None
        payload = json.loads(path.read_bytes())
        body = payload["body"]
        if not isinstance(body, dict) or payload.get("checksum") != checksum(body):
            return None
        return body
    except (OSError, ValueError, TypeError, KeyError, RecursionError):
        return None


def write_document(path: Path, body: dict[str, Any]) -> None:
    """Store ``body`` at ``path`` atomically; a cache that cannot be written is skipped."""
    try:
        path.parent.mkdir(mode=0o700, parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=path.parent, suffix=".part")
        try:
            with os.fdopen(handle, "w", encoding="ascii") as stream:
                json.dump({"checksum": checksum(body), "body": body}, stream)
            os.replace(temporary, path)
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
    except OSError:
        return


def remembered_names(texts: list[str]) -> dict[str, list[str]] | None:
    """{text: names it uses} recorded for exactly these expression texts, or None."""
    folder = cache_folder()
    if folder is None:
        return None
    key = text_key(texts)
    body = read_document(folder / "checked" / f"{key}.json")
    if body is None or body.get("key") != key or not isinstance(body.get("names"), dict):
        return None
    names = body["names"]
    if set(names) != set(texts):
        return None
    if not all(isinstance(v, list) and all(isinstance(n, str) for n in v) for v in names.values()):
        return None
    return names


def remember_names(texts: list[str], names: dict[str, list[str]]) -> None:
    """Record the names each accepted text uses (after the parser accepted all of them)."""
    folder = cache_folder()
    if folder is None:
        return
    key = text_key(texts)
    write_document(folder / "checked" / f"{key}.json", {"key": key, "names": names})


__all__ = [
    "CACHE_VARIABLE",
    "cache_folder",
    "read_document",
    "remember_names",
    "remembered_names",
    "text_key",
    "write_document",
]
