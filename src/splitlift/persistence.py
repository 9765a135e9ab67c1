"""Files written by splitlift: atomic writes, all-or-nothing results, the lift file format.

A lift file is a NumPy ``.npz`` archive (no pickles) holding numeric arrays
and one ``metadata`` entry: UTF-8 JSON with a format name and a schema
version, so that a reader can refuse what it does not understand instead of
guessing. Loading checks the type of every metadata entry it reads.

Every file is first written to a temporary beside its target and renamed
into place only when complete (:func:`atomic_write`). Several files that form
one result (a lift with its report and plots) are staged together and
published together (:class:`AtomicResult`): all of them or none.

Temporaries
-----------
Every temporary file or folder splitlift creates is named
``.splitlift-tmp-<process id>-<random>-<host>`` and sits beside its target,
on the same file system, so the final rename is atomic. A process killed
outright (SIGKILL, power loss) cannot remove its own; the next splitlift
write into that folder, and every command-line run for the folders it reads
and writes, removes those whose process is gone (on POSIX systems, for
processes of this host), so they never accumulate. A result killed while its
files were being moved into place is rolled back first: the previous files
come back, so a reader finds the old complete result or the new one.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import secrets
import shutil
import socket
import zipfile
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import IO

import numpy as np

LIFT_FORMAT = "splitlift.lift"
LIFT_SCHEMA_VERSION = 1

#: Every temporary file or folder of splitlift starts with this.
TEMPORARY_PREFIX = ".splitlift-tmp-"
_TEMPORARY_NAME = re.compile(r"^\.splitlift-tmp-(\d+)-[0-9a-f]{8}-(.+)$")
_JOURNAL = "journal.json"  # present while a result's files are being moved into place
_PRIMARY = "primary"  # in secondary staging folders: where the journal lives


class LiftFileError(ValueError):
    """A lift file is missing, unreadable, corrupt or of an unknown schema."""


# ------------------------------------------------------------------ temporaries
def _host_tag() -> str:
    return (re.sub(r"[^A-Za-z0-9_.]", "_", socket.gethostname()) or "host")[:40]


def _temporary_name() -> str:
    return f"{TEMPORARY_PREFIX}{os.getpid()}-{secrets.token_hex(4)}-{_host_tag()}"


def _owner_is_gone(name: str) -> bool:
    """Whether the process that made temporary ``name`` has ended (False when unsure)."""
    match = _TEMPORARY_NAME.match(name)
    if match is None or match.group(2) != _host_tag() or os.name != "posix":
        return False
    pid = int(match.group(1))
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)  # signal 0 only asks whether the process exists
    except ProcessLookupError:
        return True
    except OSError:  # it exists but belongs to someone else
        return False
    return False


def remove_stale_temporaries(folder) -> list[Path]:
    """Remove what killed splitlift processes left in ``folder``; return what went.

    A staged result whose files were being moved into place is rolled back
    first, so its targets hold the previous complete result again. Only
    temporaries of processes that have ended are touched.
    """
    try:
        entries = [entry for entry in os.scandir(folder)
                   if entry.name.startswith(TEMPORARY_PREFIX) and _owner_is_gone(entry.name)]
    except OSError:  # missing or unreadable folder: nothing of ours to clean there
        return []
    removed = []
    for entry in entries:
        path = Path(entry.path)
        if entry.is_dir(follow_symlinks=False):
            _recover_staging_folder(path)
        else:
            path.unlink(missing_ok=True)
        removed.append(path)
    return removed


# ------------------------------------------------------------------ single files
def atomic_write(path, write: Callable[[IO[bytes]], None]) -> Path:
    """Call ``write(handle)`` on a temporary file, then rename it to ``path``.

    On any failure the temporary file is removed and ``path`` is untouched,
    so a reader never sees a half-written file. Stale temporaries of killed
    runs in the same folder are removed first.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise FileNotFoundError(
            f"cannot write {target}: folder {folder} does not exist; create it first."
        )
    if target.is_dir():
        raise IsADirectoryError(f"cannot write {target}: it is a directory; give a file name.")
    remove_stale_temporaries(folder)
    temporary = folder / _temporary_name()
    # os.open applies the umask, so the file gets the usual permissions
    descriptor = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    try:
        with os.fdopen(descriptor, "wb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, target)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    return target


# ------------------------------------------------------------------ one result, many files
class AtomicResult:
    """The files of one result, published together or not at all.

    Stage each file with :meth:`file` (a path to write to) or :meth:`folder`
    (a folder to fill). Leaving the ``with`` block normally moves everything
    into place; an error, Ctrl-C or a termination signal turned into an
    exception removes everything staged and leaves the previous files as
    they were. A staging folder sits beside each target, so every move is
    one atomic rename. While the moves run, a journal in the staging folder
    lists them with a hard-linked backup of each replaced file; a run killed
    in that moment is rolled back by :func:`remove_stale_temporaries` at the
    next splitlift write into any of its folders. Concurrent results in the
    same folders are published one after the other (POSIX file locks).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> from splitlift.persistence import AtomicResult
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with AtomicResult() as result:
    ...     _ = result.file(folder / "lift.txt").write_text("matrix")
    ...     _ = result.file(folder / "report.txt").write_text("report")
    >>> sorted(path.name for path in folder.iterdir())
    ['lift.txt', 'report.txt']
    """

    def __init__(self) -> None:
        self._token = _temporary_name()
        self._staging: dict[Path, Path] = {}  # target folder -> staging folder; first: primary
        self._files: list[tuple[Path, Path]] = []
        self._folders: list[tuple[Path, Path, tuple[str, ...]]] = []
        self._targets: set[str] = set()

    def __enter__(self) -> AtomicResult:
        return self

    def __exit__(self, kind, error, trace) -> bool:
        if kind is None:
            self.commit()
        else:
            self.discard()
        return False

    def file(self, target) -> Path:
        """The path to write ``target``'s new content to (it appears at commit)."""
        target = self._claim(target)
        staged = self._staging_folder(target.parent) / f"{len(self._files)}-{target.name}"
        self._files.append((staged, target))
        return staged

    def folder(self, target, owned_names: Iterable[str] = ()) -> Path:
        """A folder to fill; at commit its files land in ``target`` (created when missing).

        ``owned_names`` are the file names a result of this kind may hold in
        ``target``; one that the new result lacks is removed at commit, so no
        file of an older result stays beside the new ones. Other files in
        ``target`` are left alone.
        """
        target = self._claim(target)
        home = target if target.is_dir() else target.parent
        staged = self._staging_folder(home) / f"folder-{len(self._folders)}"
        staged.mkdir()
        self._folders.append((staged, target, tuple(owned_names)))
        return staged

    def commit(self) -> None:
        """Move every staged file into place, or (on failure) none of them."""
        undone = True  # False only when putting the old files back failed too
        try:
            entries = self._plan()
            if not self._staging:
                return
            with _folder_locks(self._staging):
                try:
                    for entry in entries:
                        _back_up(entry)
                    primary = next(iter(self._staging.values()))
                    _write_journal(primary, entries, list(self._staging.values()))
                    for entry in entries:
                        _apply(entry)
                except BaseException:
                    undone = False
                    for entry in reversed(entries):
                        _undo(entry)
                    undone = True
                    raise
                (primary / _JOURNAL).unlink()  # from here on the new result stands
            _sync_folders(self._staging)
        finally:
            if undone:  # else the journal and backups stay for the next run to roll back
                self.discard()

    def discard(self) -> None:
        """Remove everything staged; the targets keep their previous content."""
        for staging in reversed(list(self._staging.values())):
            shutil.rmtree(staging, ignore_errors=True)
        self._staging.clear()

    # -------------------------------------------------------------- helpers
    def _claim(self, target) -> Path:
        target = Path(os.path.abspath(target))
        key = os.path.realpath(target)
        if key in self._targets:
            raise ValueError(f"{target} is staged twice in one result; give distinct paths.")
        self._targets.add(key)
        return target

    def _staging_folder(self, folder: Path) -> Path:
        if folder not in self._staging:
            if not folder.is_dir():
                raise FileNotFoundError(
                    f"cannot write into {folder}: the folder does not exist; create it first."
                )
            remove_stale_temporaries(folder)
            staging = folder / self._token
            try:
                staging.mkdir()
            except PermissionError:
                raise PermissionError(f"cannot write into {folder}: permission denied; choose a "
                                      "folder you can write to.") from None
            if self._staging:  # a secondary staging folder says where the journal will be
                primary = next(iter(self._staging.values()))
                (staging / _PRIMARY).write_text(str(primary), encoding="utf-8")
            self._staging[folder] = staging
        return self._staging[folder]

    def _plan(self) -> list[dict]:
        """One entry per move (staged -> target) or removal (source None)."""
        moves: list[tuple[Path | None, Path, bool]] = []
        for staged, target in self._files:
            if not staged.is_file():
                raise FileNotFoundError(f"nothing was written for {target}; the result is "
                                        "incomplete, so no file was changed.")
            moves.append((staged, target, False))
        for staged, target, owned in self._folders:
            if not target.exists():
                moves.append((staged, target, True))  # a new folder: one rename
                continue
            produced = sorted(child.name for child in staged.iterdir())
            moves += [(staged / name, target / name, False) for name in produced]
            moves += [(None, target / name, False) for name in owned
                      if name not in produced and os.path.lexists(target / name)]
        entries = []
        for number, (source, target, is_folder) in enumerate(moves):
            backup = self._staging_folder(target.parent) / f"backup-{number}"
            entries.append({
                "source": None if source is None else str(source),
                "target": str(target),
                "identity": None if source is None else _identity(source),
                "backup": str(backup),
                "folder": is_folder,
            })
        return entries


def _identity(path) -> list[int] | None:
    try:
        status = os.lstat(path)
    except OSError:
        return None
    return [status.st_dev, status.st_ino]


def _back_up(entry: dict) -> None:
    """Keep the target's current directory entry (hard link, else a copy) for undoing."""
    target, backup = entry["target"], entry["backup"]
    if entry["folder"] or not os.path.lexists(target):
        entry["backup"] = None
        return
    try:
        os.link(target, backup, follow_symlinks=False)
    except (OSError, NotImplementedError):  # no hard links here
        shutil.copy2(target, backup, follow_symlinks=False)


def _apply(entry: dict) -> None:
    if entry["source"] is None:
        Path(entry["target"]).unlink(missing_ok=True)
    elif entry["folder"]:
        os.rename(entry["source"], entry["target"])
    else:
        os.replace(entry["source"], entry["target"])


def _undo(entry: dict) -> None:
    """Put back what ``entry`` replaced; safe to repeat, touches only files of ours."""
    source, target, backup = entry["source"], entry["target"], entry["backup"]
    if source is None:  # a removal
        if not os.path.lexists(target) and backup and os.path.lexists(backup):
            os.replace(backup, target)
        return
    if os.path.lexists(source) or _identity(target) != entry["identity"]:
        return  # never moved, already undone, or no longer ours
    if backup is None:
        if entry["folder"]:
            shutil.rmtree(target, ignore_errors=True)
        else:
            Path(target).unlink(missing_ok=True)
    elif os.path.lexists(backup):
        os.replace(backup, target)


def _write_journal(primary: Path, entries: list[dict], staging: list[Path]) -> None:
    text = json.dumps({"entries": entries, "staging": [str(path) for path in staging]})
    partial = primary / (_JOURNAL + ".part")
    with open(partial, "w", encoding="utf-8") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(partial, primary / _JOURNAL)
    _sync_folders([primary])


def _read_journal(primary: Path) -> dict | None:
    """The journal of a staged result, or None when absent or not ours."""
    try:
        journal = json.loads((primary / _JOURNAL).read_text(encoding="utf-8"))
        staging = [Path(path) for path in journal["staging"]]
        entries = journal["entries"]
        inside = [Path(entry[key]).parent for entry in entries
                  for key in ("source", "backup") if entry[key] is not None]
    except (OSError, ValueError, KeyError, TypeError):
        return None
    if not all(path.name.startswith(TEMPORARY_PREFIX) for path in staging):
        return None
    if not all(any(path.is_relative_to(folder) for folder in staging) for path in inside):
        return None  # a journal that points outside its own staging folders is not ours
    return journal


def _recover_staging_folder(staging: Path) -> None:
    """Roll back (journal present) and remove the staging folder of an ended process."""
    primary = staging
    with contextlib.suppress(OSError, UnicodeDecodeError):
        pointer = staging / _PRIMARY
        if pointer.is_file():
            primary = Path(pointer.read_text(encoding="utf-8"))
    journal = _read_journal(primary)
    if journal is not None:
        for entry in reversed(journal["entries"]):
            with contextlib.suppress(OSError):
                _undo(entry)
        (primary / _JOURNAL).unlink(missing_ok=True)
        for folder in journal["staging"]:
            shutil.rmtree(folder, ignore_errors=True)
    shutil.rmtree(staging, ignore_errors=True)


@contextlib.contextmanager
def _folder_locks(folders: Iterable[Path]):
    """Exclusive POSIX locks on ``folders`` (sorted, so concurrent results cannot deadlock)."""
    try:
        import fcntl
    except ImportError:  # not POSIX: no locking
        yield
        return
    descriptors = []
    try:
        for folder in sorted({os.path.realpath(folder) for folder in folders}):
            descriptors.append(os.open(folder, os.O_RDONLY))
            fcntl.flock(descriptors[-1], fcntl.LOCK_EX)
        yield
    finally:
        for descriptor in descriptors:
            os.close(descriptor)  # closing releases the lock


def _sync_folders(folders: Iterable[Path]) -> None:
    """Flush renames in ``folders`` to disk (POSIX; best effort)."""
    if os.name != "posix":
        return
    for folder in folders:
        with contextlib.suppress(OSError):
            descriptor = os.open(folder, os.O_RDONLY)
            try:
                os.fsync(descriptor)
            finally:
                os.close(descriptor)


# ------------------------------------------------------------------ lift files
def write_lift_file(path, arrays: dict[str, np.ndarray], metadata: dict) -> Path:
    """Write numeric ``arrays`` and JSON ``metadata`` as a lift file, atomically."""
    header = {"format": LIFT_FORMAT, "schema_version": LIFT_SCHEMA_VERSION, **metadata}
    encoded = np.frombuffer(json.dumps(header, sort_keys=True).encode("utf-8"), dtype=np.uint8)
    payload = {name: np.asarray(value, dtype=float) for name, value in arrays.items()}
    return atomic_write(path, lambda handle: np.savez(handle, metadata=encoded, **payload))


def read_lift_file(path, required: tuple[str, ...] = ("matrix",)) -> tuple[dict, dict]:
    """Read a lift file; return ``(arrays, metadata)`` or raise :class:`LiftFileError`.

    Every array must be real and numeric, and every metadata entry that
    splitlift reads must have its documented JSON type.
    """
    source = Path(path)
    if source.is_dir():
        raise LiftFileError(f"{source} is a directory, not a lift file; give the .npz file.")
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
    not_real = [name for name, value in contents.items() if value.dtype.kind not in "fiu"]
    if not_real:
        raise LiftFileError(f"{source}: the entries {not_real} are not real numbers; the file "
                            "is corrupt. Save the lift again.")
    _check_metadata_types(source, metadata)
    return contents, metadata


def _is_integer(value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_number(value) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


#: The JSON type of every metadata entry splitlift reads (None: entry may be null).
_METADATA_TYPES: dict[str, tuple[str, Callable[[object], bool]]] = {
    "n_features": ("a positive integer", lambda v: _is_integer(v) and v > 0),
    "n_directions": ("a positive integer", lambda v: _is_integer(v) and v > 0),
    "feature_names": ("null or a list of distinct strings", lambda v: v is None or (
        isinstance(v, list) and all(isinstance(n, str) for n in v) and len(set(v)) == len(v))),
    "info": ("an object", lambda v: isinstance(v, dict)),
}
_INFO_TYPES: dict[str, tuple[str, Callable[[object], bool]]] = {
    "report_text": ("a string", lambda v: isinstance(v, str)),
    "complement_weight": ("a number", _is_number),
    "weight_form": ("a string", lambda v: isinstance(v, str)),
    "n_columns": ("null or a positive integer", lambda v: v is None or (_is_integer(v) and v > 0)),
    "output_columns": ("a positive integer", lambda v: _is_integer(v) and v > 0),
    "estimator": ("a string", lambda v: isinstance(v, str)),
    "diagnostics": ("an object", lambda v: isinstance(v, dict)),
}


def _json_type(value) -> str:
    for kind, name in ((bool, "a boolean"), (int | float, "a number"), (str, "a string"),
                       (list, "an array"), (dict, "an object")):
        if isinstance(value, kind):
            return name
    return "null"


def _check_metadata_types(source: Path, metadata: dict) -> None:
    for table, values, where in ((_METADATA_TYPES, metadata, "metadata"),
                                 (_INFO_TYPES, metadata.get("info") or {}, "metadata info")):
        for name, (kind, is_valid) in table.items():
            if name in values and not is_valid(values[name]):
                raise LiftFileError(
                    f"{source}: {where} entry {name!r} should be {kind}, not "
                    f"{_json_type(values[name])} {json.dumps(values[name])[:60]}; the file is "
                    "corrupt or was edited. Save the lift again."
                )
    for name in ("n_features", "n_directions"):
        if name not in metadata:
            raise LiftFileError(f"{source}: metadata entry {name!r} is missing; the file is "
                                "corrupt. Save the lift again.")
