"""Files written by splitlift: atomic writes and the lift file format.

A lift file is a NumPy ``.npz`` archive (no pickles) holding numeric arrays
and one ``metadata`` entry: UTF-8 JSON with a format name and a schema
version, so that a reader can refuse what it does not understand instead of
guessing. Every write goes to a temporary file in the target folder and is
renamed into place only when complete.
"""

from __future__ import annotations

import json
import os
import tempfile
import zipfile
from collections.abc import Callable
from pathlib import Path
from typing import IO

import numpy as np

LIFT_FORMAT = "splitlift.lift"
LIFT_SCHEMA_VERSION = 1


class LiftFileError(ValueError):
    """A lift file is missing, unreadable, corrupt or of an unknown schema."""


def atomic_write(path, write: Callable[[IO[bytes]], None]) -> Path:
    """Call ``write(handle)`` on a temporary file, then rename it to ``path``.

    On any failure the temporary file is removed and ``path`` is untouched,
    so a reader never sees a half-written file.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise FileNotFoundError(
            f"cannot write {target}: folder {folder} does not exist; create it first."
        )
    descriptor, temporary = tempfile.mkstemp(prefix=f".{target.name}.", dir=folder)
    try:
        # mkstemp makes the file private (0600); give it the usual permissions
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        with os.fdopen(descriptor, "wb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    return target


def write_lift_file(path, arrays: dict[str, np.ndarray], metadata: dict) -> Path:
    """Write numeric ``arrays`` and JSON ``metadata`` as a lift file, atomically."""
    header = {"format": LIFT_FORMAT, "schema_version": LIFT_SCHEMA_VERSION, **metadata}
    encoded = np.frombuffer(json.dumps(header, sort_keys=True).encode("utf-8"), dtype=np.uint8)
    payload = {name: np.asarray(value, dtype=float) for name, value in arrays.items()}
    return atomic_write(path, lambda handle: np.savez(handle, metadata=encoded, **payload))


def read_lift_file(path, required: tuple[str, ...] = ("matrix",)) -> tuple[dict, dict]:
    """Read a lift file; return ``(arrays, metadata)`` or raise :class:`LiftFileError`."""
    source = Path(path)
    if not source.is_file():
        raise LiftFileError(f"lift file {source} does not exist; check the path.")
    try:
        with np.load(source, allow_pickle=False) as archive:
            contents = {name: archive[name] for name in archive.files}
    except (OSError, ValueError, EOFError, zipfile.BadZipFile, KeyError) as error:
        raise LiftFileError(
            f"{source} is not a readable lift file ({type(error).__name__}: {error}); "
            "it may be truncated or not written by splitlift. Save the lift again."
        ) from None
    if "metadata" not in contents:
        raise LiftFileError(f"{source} has no metadata entry; it was not written by splitlift.")
    try:
        metadata = json.loads(contents.pop("metadata").tobytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as error:
        raise LiftFileError(
            f"{source} has corrupt metadata ({error}); save the lift again."
        ) from None
    if not isinstance(metadata, dict) or metadata.get("format") != LIFT_FORMAT:
        raise LiftFileError(f"{source} is not a splitlift lift file (wrong format tag).")
    version = metadata.get("schema_version")
    if version != LIFT_SCHEMA_VERSION:
        raise LiftFileError(
            f"{source} uses lift schema version {version!r}; this splitlift reads version "
            f"{LIFT_SCHEMA_VERSION}. Upgrade splitlift or save the lift again."
        )
    missing = [name for name in required if name not in contents]
    if missing:
        raise LiftFileError(f"{source} lacks the entries {missing}; save the lift again.")
    return contents, metadata
