"""Writing the tool's outputs without ever moving or deleting a file the tool did not write.

An output folder may already hold the user's own files (a container volume, a shared project
folder, the study itself when the user mistypes ``-o``). The rules, in the order a write follows them:

1. **Refuse unsafe targets** before any work: an empty path, the current folder or one of its
   ancestors, a protected folder (the study) or one of its ancestors, the filesystem root or the
   home folder. The output folder itself is never renamed, so a mount point is as good as any other.
2. **Take a lock** (``.auditor-lock``, created exclusively) so that two runs cannot write one folder.
   The lock names the process and every temporary file the run will create, before it creates them.
3. **Write new files beside the old ones** under temporary names listed in the lock, then record the
   renames in a journal (``.auditor-journal.json``, written atomically): the commit point.
4. **Rename only the tool's own files** into place. An interrupt during the renames finishes them
   before it is passed on; after a hard kill the next write to the folder (or
   :func:`recover_folder`) completes them from the journal. Before the commit point a failure removes
   the temporary files and leaves the previous outputs as they were.

So the folder holds either the complete previous set of outputs or the complete new set, and every
other entry of it keeps its bytes.
"""

from __future__ import annotations

import errno
import json
import os
import secrets
import socket
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Iterator

LOCK_NAME = ".auditor-lock"
JOURNAL_NAME = ".auditor-journal.json"
PARTIAL_PREFIX = ".auditor-partial-"


class OutputRefused(Exception):
    """An output target the tool will not write to, with the reason and the fix in the message."""


@dataclass
class Recovery:
    """What :func:`recover_folder` found of an interrupted earlier write."""

    completed: list[str] = field(default_factory=list)
    """Outputs whose rename an interrupted run had committed to and this call finished."""
    discarded: int = 0
    """Temporary files of a run interrupted before its commit point, removed."""

    def message(self, folder: Path) -> str:
        parts = []
        if self.completed:
            parts.append(f"finished writing {', '.join(self.completed)} left by an interrupted run")
        if self.discarded:
            parts.append(f"removed {self.discarded} temporary file(s) of an interrupted run")
        return f"{folder}: " + "; ".join(parts) if parts else ""


# --------------------------------------------------------------------------- refusing unsafe targets


def _is_same_or_ancestor(candidate: Path, of: Path) -> bool:
    return candidate == of or candidate in of.parents


def refuse_unsafe_folder(out_dir: Path, protected: Iterable[Path] = (), what: str = "output folder") -> Path:
    """The resolved output folder, or :class:`OutputRefused` when writing there could endanger
    files the tool did not write (see the module docstring for the list)."""
    if not str(out_dir).strip():
        raise OutputRefused(f"the {what} is empty. Fix: name a new or dedicated folder, e.g. -o audit_out")
    resolved = Path(os.path.abspath(Path(out_dir).expanduser())).resolve()
    cwd = Path.cwd().resolve()
    if resolved == cwd:
        raise OutputRefused(f"{out_dir}: the {what} is the current folder. Fix: name a new or dedicated "
                            f"folder, e.g. -o audit_out")
    if resolved in cwd.parents:
        raise OutputRefused(f"{out_dir}: the {what} holds the current folder. Fix: name a new or dedicated "
                            f"folder, e.g. -o audit_out")
    if resolved == Path(resolved.anchor) or resolved == Path.home().resolve():
        raise OutputRefused(f"{out_dir}: the {what} is the filesystem root or the home folder. Fix: name a new "
                            f"or dedicated folder")
    for p in protected:
        p_res = Path(os.path.abspath(Path(p).expanduser())).resolve()
        if _is_same_or_ancestor(resolved, p_res):
            kind = "is" if resolved == p_res else "holds"
            raise OutputRefused(f"{out_dir}: the {what} {kind} the input folder {p}. Fix: write the audit to a "
                                f"folder of its own, e.g. -o {p_res.name}_audit")
    if resolved.exists() and not resolved.is_dir():
        raise OutputRefused(f"{out_dir}: exists and is not a folder. Fix: name a folder")
    return resolved


def refuse_existing(out_dir: Path, names: Iterable[str], force: bool, what: str = "an audit") -> None:
    """Refuse to replace outputs already present unless ``force``; refuse always when an output's
    name is taken by something that is not a plain file (a folder, a socket...)."""
    present = []
    for name in names:
        p = Path(out_dir) / name
        if p.is_symlink() or p.exists():
            if not p.is_symlink() and not p.is_file():
                raise OutputRefused(f"{p}: is not a file, so it cannot be replaced. Fix: move it or choose "
                                    f"another output folder")
            present.append(name)
    if present and not force:
        raise OutputRefused(f"{out_dir} already holds {what} ({', '.join(present)}). Fix: use --force to "
                            f"replace it, or choose another folder")


def refuse_existing_file(path: Path, force: bool, inputs: Iterable[Path] = ()) -> Path:
    """One output file: never one of the command's own inputs, never a folder, and an existing file
    only with ``force``."""
    resolved = Path(os.path.abspath(Path(path).expanduser())).resolve()
    for p in inputs:
        if Path(os.path.abspath(p)).resolve() == resolved:
            raise OutputRefused(f"{path}: is one of this command's inputs. Fix: write the output elsewhere")
    if resolved.exists() and not resolved.is_file():
        raise OutputRefused(f"{path}: exists and is not a file. Fix: name a file")
    if resolved.exists() and not force:
        raise OutputRefused(f"{path} already exists. Fix: use --force to replace it, or name another file")
    return resolved


# --------------------------------------------------------------------------- the lock


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _read_json(path: Path) -> dict | None:
    try:
        value = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return value if isinstance(value, dict) else None


def _write_json_exclusive(path: Path, value: dict) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        json.dump(value, fh)
        fh.flush()
        os.fsync(fh.fileno())


def _lock_is_stale(lock: dict | None) -> bool:
    """A lock left by a process of this machine that no longer runs (an unreadable lock is left
    alone: it may be being written)."""
    if lock is None:
        return False
    if lock.get("host") != socket.gethostname():
        return False
    pid = lock.get("pid")
    return isinstance(pid, int) and not _process_alive(pid)


def _own_name(name: object) -> bool:
    """Only names this module generates are ever removed."""
    return isinstance(name, str) and name.startswith(PARTIAL_PREFIX) and "/" not in name and "\\" not in name


def recover_folder(out_dir: Path) -> Recovery:
    """Finish or undo an interrupted write in ``out_dir`` whose lock is stale.

    With a journal (the run had passed its commit point) the remaining renames are done; without one,
    the temporary files the stale lock lists are removed. Nothing else is touched. A live lock is left
    alone (see :func:`folder_lock`)."""
    rec = Recovery()
    out_dir = Path(out_dir)
    lock_path = out_dir / LOCK_NAME
    if not lock_path.exists():
        return rec
    lock = _read_json(lock_path)
    if not _lock_is_stale(lock):
        return rec
    journal = _read_json(out_dir / JOURNAL_NAME)
    if journal is not None and journal.get("token") == lock.get("token"):
        rec.completed = _apply_renames(out_dir, journal.get("renames", []))
        (out_dir / JOURNAL_NAME).unlink(missing_ok=True)
    for name in lock.get("partials", []):
        if _own_name(name) and (out_dir / name).exists():
            (out_dir / name).unlink()
            rec.discarded += 1
    lock_path.unlink(missing_ok=True)
    return rec


@contextmanager
def folder_lock(out_dir: Path, partials: list[str], token: str) -> Iterator[Recovery]:
    """Hold ``out_dir``'s lock for the duration of a write, recovering a stale one first."""
    lock_path = out_dir / LOCK_NAME
    recovery = recover_folder(out_dir)
    body = {"pid": os.getpid(), "host": socket.gethostname(), "token": token, "partials": partials}
    try:
        _write_json_exclusive(lock_path, body)
    except FileExistsError:
        held = _read_json(lock_path) or {}
        raise OutputRefused(f"{out_dir}: another auditor run (process {held.get('pid', '?')}) is writing "
                            f"there. Fix: wait for it to finish; if no run is active, delete "
                            f"{lock_path}") from None
    try:
        yield recovery
    finally:
        unfinished = (_read_json(out_dir / JOURNAL_NAME) or {}).get("token") == token
        if not unfinished and (_read_json(lock_path) or {}).get("token") == token:
            lock_path.unlink(missing_ok=True)


# --------------------------------------------------------------------------- writing a set of files


def _write_new(path: Path, content: bytes) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    with os.fdopen(fd, "wb") as fh:
        fh.write(content)
        fh.flush()
        os.fsync(fh.fileno())


def _apply_renames(out_dir: Path, renames: list) -> list[str]:
    """Move each journalled temporary file onto its final name; already-moved ones are skipped, so
    this can be repeated after any interruption."""
    done = []
    for pair in renames:
        if not (isinstance(pair, list) and len(pair) == 2 and _own_name(pair[0]) and isinstance(pair[1], str)):
            continue
        src, dst = out_dir / pair[0], out_dir / Path(pair[1]).name
        if src.exists():
            os.replace(src, dst)
            done.append(dst.name)
    return done


def _commit(out_dir: Path, journal: dict) -> None:
    """Do the journalled renames; an interrupt (Ctrl-C) in the middle finishes them, then is raised.

    If a rename itself fails, the journal and the lock stay, so the next write (or
    :func:`recover_folder`) finishes the set."""
    try:
        _apply_renames(out_dir, journal["renames"])
    except OSError:
        raise
    except BaseException:
        _apply_renames(out_dir, journal["renames"])
        (out_dir / JOURNAL_NAME).unlink(missing_ok=True)
        raise
    (out_dir / JOURNAL_NAME).unlink(missing_ok=True)


def _make_folder(out_dir: Path) -> list[Path]:
    """Create ``out_dir`` and any missing parents; the folders created, deepest first."""
    created = []
    p = out_dir
    while not p.exists():
        created.append(p)
        p = p.parent
    out_dir.mkdir(parents=True, exist_ok=True)
    return created


def _remove_if_empty(folders: list[Path]) -> None:
    for f in folders:
        try:
            f.rmdir()
        except OSError:
            return


def write_file_set(files: dict[str, bytes], out_dir: Path, force: bool = False,
                   protected: Iterable[Path] = (), what: str = "an audit") -> tuple[list[Path], Recovery]:
    """Write ``files`` (name -> bytes) into ``out_dir`` all together or not at all.

    Returns the paths written and what was recovered of an interrupted earlier run. Raises
    :class:`OutputRefused` for an unsafe or occupied target and for a folder the tool cannot write
    to (the previous outputs are then untouched)."""
    out_dir = refuse_unsafe_folder(Path(out_dir), protected)
    names = list(files)
    created = _make_folder(out_dir) if not out_dir.exists() else []
    token = secrets.token_hex(8)
    partials = {name: f"{PARTIAL_PREFIX}{token}-{name}" for name in names}
    journal_tmp = f"{PARTIAL_PREFIX}{token}-journal"
    try:
        with folder_lock(out_dir, sorted(partials.values()) + [journal_tmp], token) as recovery:
            refuse_existing(out_dir, names, force, what)
            try:
                for name in names:
                    _write_new(out_dir / partials[name], files[name])
                journal = {"token": token, "renames": [[partials[n], n] for n in names]}
                _write_new(out_dir / journal_tmp, json.dumps(journal).encode("utf-8"))
                os.replace(out_dir / journal_tmp, out_dir / JOURNAL_NAME)
            except BaseException:
                for tmp in list(partials.values()) + [journal_tmp]:
                    (out_dir / tmp).unlink(missing_ok=True)
                raise
            _commit(out_dir, journal)
    except OSError as exc:
        _remove_if_empty(created)
        raise OutputRefused(f"{out_dir}: cannot write there ({_os_reason(exc)}). Fix: check the folder's "
                            f"permissions and free space, or choose another folder") from exc
    except BaseException:
        _remove_if_empty(created)
        raise
    return [out_dir / n for n in names], recovery


def write_one_file(path: Path, content: bytes, force: bool = False, inputs: Iterable[Path] = ()) -> Path:
    """One file written under a temporary name beside its final one and renamed into place (one
    rename is atomic); never over one of the command's inputs, and over an existing file only with
    ``force``. Only the temporary file is ever removed on failure."""
    path = refuse_existing_file(Path(path), force, inputs)
    tmp = path.parent / f"{PARTIAL_PREFIX}{secrets.token_hex(8)}-{path.name}"
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        _write_new(tmp, content)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputRefused(f"{path}: cannot write there ({_os_reason(exc)}). Fix: check the permissions "
                            f"and free space, or name another file") from exc
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def _os_reason(exc: OSError) -> str:
    if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        return "permission denied or read-only"
    if exc.errno == errno.ENOSPC:
        return "no space left"
    return exc.strerror or type(exc).__name__
