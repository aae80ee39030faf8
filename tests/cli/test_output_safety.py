"""The tool never moves or deletes a file it did not write, whatever fails and wherever the output goes.

Every test snapshots the user's files (paths and bytes) around the output folder, injects a fault at
one step of a write (before, between and after each rename; read-only entries; a second writer; an
interrupt; a hard kill), and asserts that the snapshot is unchanged and that the output folder holds
the complete previous set of outputs, the complete new set, or none.
"""

from __future__ import annotations

import errno
import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

import auditor.writeguard as wg
from auditor.cli import app
from auditor.writeguard import OutputRefused, recover_folder, write_file_set
from tests.cli.test_hostile_inputs import FAST, Synthetic
from tests.cli.test_validate_broken import _stderr, runner

ROOT = Path(__file__).resolve().parents[2]
OLD = {"audit.html": b"old html", "audit.pdf": b"old pdf", "findings.json": b"{}", "findings.csv": b"old,csv\n"}
NEW = {"audit.html": b"new html", "audit.pdf": b"new pdf", "findings.json": b'{"n": 1}', "findings.csv": b"new\n"}


def snapshot(root: Path, skip: tuple[str, ...] = tuple(OLD)) -> dict[str, bytes | None]:
    """Every entry under ``root`` except the tool's outputs and its own lock, journal and temporary
    files: the user's files with their bytes, folders as None."""
    out: dict[str, bytes | None] = {}
    for p in sorted(root.rglob("*")):
        rel = p.relative_to(root).as_posix()
        if p.name in skip or p.name.startswith(".auditor-"):
            continue
        out[rel] = None if p.is_dir() else p.read_bytes()
    return out


def outputs_state(folder: Path) -> str:
    """'old', 'new' or 'none' when the folder holds one whole set; 'mixed' otherwise."""
    present = {n: (folder / n).read_bytes() for n in OLD if (folder / n).exists()}
    if not present:
        return "none"
    for name, files in (("old", OLD), ("new", NEW)):
        if present == files:
            return name
    return "mixed"


def leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith(".auditor"))


@pytest.fixture
def user_folder(tmp_path) -> Path:
    """An output folder that already holds the user's own files (and a previous audit)."""
    out = tmp_path / "shared"
    (out / "notes").mkdir(parents=True)
    (out / "notes" / "memo.txt").write_text("the user's memo")
    (out / "data.csv").write_bytes(b"id,value\n1,2\n")
    (out / ".hidden").write_text("a dotfile of the user's")
    (out / "lookalike.partial").write_text("not the tool's")
    for name, content in OLD.items():
        (out / name).write_bytes(content)
    return out


def dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


# --------------------------------------------------------------------------- unsafe targets


def _study(tmp_path: Path) -> Path:
    return Synthetic(n_per_arm=10).write(tmp_path / "proj" / "study")


@pytest.mark.parametrize("target", [".", "", "..", "STUDY", "STUDY_PARENT", "/"])
def test_run_refuses_folders_that_hold_the_users_files(tmp_path, monkeypatch, target):
    study = _study(tmp_path)
    work = tmp_path / "proj" / "work"
    work.mkdir()
    (work / "keep.txt").write_text("mine")
    monkeypatch.chdir(work)
    before = snapshot(tmp_path / "proj")
    out = {"STUDY": str(study), "STUDY_PARENT": str(study.parent)}.get(target, target)
    res = runner.invoke(app, ["run", str(study), "-o", out, "--force", *FAST])
    assert res.exit_code == 2, (res.output, res.exception)
    assert "Fix:" in _stderr(res) and "Traceback" not in _stderr(res)
    assert snapshot(tmp_path / "proj", skip=()) == before


def test_selfcheck_refuses_the_current_folder(tmp_path, monkeypatch):
    (tmp_path / "keep.txt").write_text("mine")
    monkeypatch.chdir(tmp_path)
    res = runner.invoke(app, ["selfcheck", "-o", ".", "--force", "--only", "change-score/null/slope"])
    assert res.exit_code == 2 and "current folder" in _stderr(res)
    assert snapshot(tmp_path, skip=()) == {"keep.txt": b"mine"}


def test_run_into_a_folder_of_user_files_keeps_them_and_replaces_only_the_audit(tmp_path, user_folder):
    study = _study(tmp_path)
    before = snapshot(user_folder)
    refused = runner.invoke(app, ["run", str(study), "-o", str(user_folder), *FAST])
    assert refused.exit_code == 2 and "--force" in _stderr(refused)
    assert outputs_state(user_folder) == "old"
    res = runner.invoke(app, ["run", str(study), "-o", str(user_folder), "--force", *FAST])
    assert res.exit_code == 0, (res.output, res.exception)
    assert snapshot(user_folder) == before
    assert (user_folder / "audit.pdf").read_bytes().startswith(b"%PDF")
    assert json.loads((user_folder / "findings.json").read_text())["study_id"] == "SYN-01"
    assert leftovers(user_folder) == []


def test_a_mount_point_output_folder_is_never_renamed(user_folder, monkeypatch):
    # A container volume cannot be renamed (EBUSY); the write must not need to.
    real = os.replace

    def no_folder_renames(src, dst, *a, **k):
        if Path(src).is_dir() or Path(dst) == user_folder:
            raise OSError(errno.EBUSY, "Device or resource busy")
        return real(src, dst, *a, **k)

    monkeypatch.setattr(wg.os, "replace", no_folder_renames)
    before = snapshot(user_folder)
    write_file_set(NEW, user_folder, force=True)
    assert outputs_state(user_folder) == "new" and snapshot(user_folder) == before


# --------------------------------------------------------------------------- faults at every step

# _write_new is called once per output then once for the journal; os.replace once for the journal
# (the commit point) and once per output.
N_WRITES = len(NEW) + 1
N_RENAMES = len(NEW) + 1


def _failing_on(k: int, real, exc: BaseException):
    calls = [0]

    def wrapper(*args, **kwargs):
        calls[0] += 1
        if calls[0] == k:
            raise exc
        return real(*args, **kwargs)

    return wrapper


@pytest.mark.parametrize("k", range(1, N_WRITES + 1))
@pytest.mark.parametrize("exc", [OSError(errno.EACCES, "Permission denied"), KeyboardInterrupt()],
                         ids=["read-only", "interrupt"])
def test_a_failed_temporary_write_leaves_the_previous_audit(user_folder, monkeypatch, k, exc):
    before = snapshot(user_folder)
    monkeypatch.setattr(wg, "_write_new", _failing_on(k, wg._write_new, exc))
    with pytest.raises((OutputRefused, KeyboardInterrupt)):
        write_file_set(NEW, user_folder, force=True)
    assert outputs_state(user_folder) == "old"
    assert snapshot(user_folder) == before
    assert leftovers(user_folder) == []


@pytest.mark.parametrize("k", range(1, N_RENAMES + 1))
def test_an_interrupt_at_any_rename_ends_with_one_whole_audit(user_folder, monkeypatch, k):
    before = snapshot(user_folder)
    monkeypatch.setattr(wg.os, "replace", _failing_on(k, os.replace, KeyboardInterrupt()))
    with pytest.raises(KeyboardInterrupt):
        write_file_set(NEW, user_folder, force=True)
    # Before the commit point (k = 1) the old audit stays; after it the renames are finished.
    assert outputs_state(user_folder) == ("old" if k == 1 else "new")
    assert snapshot(user_folder) == before
    assert leftovers(user_folder) == []


@pytest.mark.parametrize("k", range(2, N_RENAMES + 1))
def test_a_rename_that_fails_after_the_commit_point_is_finished_by_the_next_run(user_folder, monkeypatch, k):
    before = snapshot(user_folder)
    monkeypatch.setattr(wg.os, "replace", _failing_on(k, os.replace, OSError(errno.EROFS, "Read-only")))
    with pytest.raises(OutputRefused):
        write_file_set(NEW, user_folder, force=True)
    monkeypatch.undo()
    lock = json.loads((user_folder / wg.LOCK_NAME).read_text())
    lock["pid"] = dead_pid()  # the failed run has since exited
    (user_folder / wg.LOCK_NAME).write_text(json.dumps(lock))
    recovery = recover_folder(user_folder)
    assert recovery.completed and outputs_state(user_folder) == "new"
    assert snapshot(user_folder) == before and leftovers(user_folder) == []


def test_a_read_only_subfolder_is_left_as_it_is(user_folder):
    ro = user_folder / "notes"
    ro.chmod(0o555)
    try:
        before = snapshot(user_folder)
        write_file_set(NEW, user_folder, force=True)
        assert snapshot(user_folder) == before and outputs_state(user_folder) == "new"
    finally:
        ro.chmod(0o755)


def test_a_folder_that_cannot_be_written_is_a_clean_refusal(tmp_path, user_folder, monkeypatch):
    study = _study(tmp_path)
    before = snapshot(user_folder)
    monkeypatch.setattr(wg, "_write_new", _failing_on(1, wg._write_new, PermissionError(errno.EACCES, "denied")))
    res = runner.invoke(app, ["run", str(study), "-o", str(user_folder), "--force", *FAST])
    assert res.exit_code == 2 and "cannot write there" in _stderr(res), (res.output, res.exception)
    assert outputs_state(user_folder) == "old" and snapshot(user_folder) == before
    assert leftovers(user_folder) == []


def test_a_new_folder_is_removed_again_when_nothing_could_be_written(tmp_path, monkeypatch):
    target = tmp_path / "a" / "b" / "out"
    monkeypatch.setattr(wg, "_write_new", _failing_on(1, wg._write_new, OSError(errno.ENOSPC, "full")))
    with pytest.raises(OutputRefused, match="no space left"):
        write_file_set(NEW, target)
    assert not (tmp_path / "a").exists()


# --------------------------------------------------------------------------- other processes

_CHILD = textwrap.dedent("""
    import os, signal, sys, time
    from pathlib import Path
    # A shell without job control starts background jobs with SIGINT ignored, and Python keeps that;
    # the child's own Ctrl-C must raise KeyboardInterrupt however the tests were started.
    signal.signal(signal.SIGINT, signal.default_int_handler)
    sys.path.insert(0, {root!r})
    import auditor.writeguard as wg
    target, mode, k = Path(sys.argv[1]), sys.argv[2], int(sys.argv[3])
    new = {new!r}
    real_replace, real_write, calls = os.replace, wg._write_new, [0]

    def replace(src, dst):
        calls[0] += 1
        if calls[0] == k:
            if mode == "kill":
                os._exit(9)
            if mode == "sigint":
                os.kill(os.getpid(), signal.SIGINT)
        return real_replace(src, dst)

    def slow_write(path, content):
        time.sleep(0.05)
        return real_write(path, content)

    if mode == "race":
        wg._write_new = slow_write
    else:
        wg.os.replace = replace
    try:
        wg.write_file_set(new, target, force=True)
    except wg.OutputRefused as exc:
        print("refused:", exc)
        sys.exit(2)
""")


def _child(target: Path, mode: str, k: int = 0) -> subprocess.Popen:
    script = _CHILD.format(root=str(ROOT), new=NEW)
    return subprocess.Popen([sys.executable, "-c", script, str(target), mode, str(k)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


@pytest.mark.parametrize("k", range(1, N_RENAMES + 1))
def test_a_hard_kill_at_any_rename_is_recovered_by_the_next_run(user_folder, k):
    before = snapshot(user_folder)
    proc = _child(user_folder, "kill", k)
    proc.communicate(timeout=60)
    assert proc.returncode == 9
    assert snapshot(user_folder) == before
    assert (user_folder / wg.LOCK_NAME).exists()
    # The next write (here the same new audit again) first finishes or discards the interrupted one.
    _, recovery = write_file_set(NEW, user_folder, force=True)
    assert bool(recovery.completed) == (k > 1) and bool(recovery.discarded) == (k == 1)
    assert outputs_state(user_folder) == "new" and snapshot(user_folder) == before
    assert leftovers(user_folder) == []


@pytest.mark.parametrize("k", [1, 3])
def test_a_real_sigint_during_the_renames_ends_with_one_whole_audit(user_folder, k):
    before = snapshot(user_folder)
    proc = _child(user_folder, "sigint", k)
    _, stderr = proc.communicate(timeout=60)
    assert proc.returncode != 0 and "KeyboardInterrupt" in stderr
    assert outputs_state(user_folder) == ("old" if k == 1 else "new")
    assert snapshot(user_folder) == before and leftovers(user_folder) == []


def test_two_concurrent_writers_never_mix_or_lose_files(user_folder):
    before = snapshot(user_folder)
    procs = [_child(user_folder, "race") for _ in range(2)]
    codes = [p.wait(timeout=60) for p in procs]
    assert 0 in codes and set(codes) <= {0, 2}
    if 2 in codes:
        assert "another auditor run" in "".join(p.stdout.read() for p in procs)
    assert outputs_state(user_folder) == "new"
    assert snapshot(user_folder) == before and leftovers(user_folder) == []


def test_a_live_lock_refuses_a_second_run(user_folder):
    (user_folder / wg.LOCK_NAME).write_text(json.dumps({"pid": os.getpid(), "host": wg.socket.gethostname()}))
    with pytest.raises(OutputRefused, match="another auditor run"):
        write_file_set(NEW, user_folder, force=True)
    assert outputs_state(user_folder) == "old"


def test_a_stale_lock_removes_only_the_temporary_files_it_lists(user_folder):
    listed = wg.PARTIAL_PREFIX + "dead-audit.html"
    unlisted = wg.PARTIAL_PREFIX + "someone-elses"
    (user_folder / listed).write_bytes(b"half")
    (user_folder / unlisted).write_bytes(b"not in the lock")
    (user_folder / wg.LOCK_NAME).write_text(json.dumps(
        {"pid": dead_pid(), "host": wg.socket.gethostname(), "token": "dead", "partials": [listed, "../data.csv"]}))
    recovery = recover_folder(user_folder)
    assert recovery.discarded == 1 and not (user_folder / listed).exists()
    assert (user_folder / unlisted).read_bytes() == b"not in the lock"
    assert (user_folder / "data.csv").exists() and outputs_state(user_folder) == "old"


# --------------------------------------------------------------------------- compare and batch


def _findings(tmp_path: Path) -> tuple[Path, Path]:
    study = _study(tmp_path)
    out = tmp_path / "audit"
    assert runner.invoke(app, ["run", str(study), "-o", str(out), *FAST]).exit_code == 0
    return study, out / "findings.json"


def test_compare_never_overwrites_an_existing_file_or_its_own_input(tmp_path):
    _, findings = _findings(tmp_path)
    original = findings.read_bytes()
    page = tmp_path / "changes.html"
    page.write_text("the user's page")
    res = runner.invoke(app, ["compare", str(findings), str(findings), "--html", str(page)])
    assert res.exit_code == 2 and "--force" in _stderr(res)
    assert page.read_text() == "the user's page"
    res = runner.invoke(app, ["compare", str(findings), str(findings), "--html", str(findings), "--force"])
    assert res.exit_code == 2 and "inputs" in _stderr(res)
    assert findings.read_bytes() == original
    res = runner.invoke(app, ["compare", str(findings), str(findings), "--html", str(page), "--force"])
    assert res.exit_code == 0 and page.read_text().startswith("<!DOCTYPE")


def test_batch_gives_every_study_its_own_folder_even_when_names_collide(tmp_path):
    from auditor.batch import output_names

    folders = [tmp_path / "x" / "a", tmp_path / "y" / "a", tmp_path / "z" / "a_2", tmp_path / "w" / "A"]
    names = output_names(folders)
    assert len({n.lower() for n in names}) == len(folders), names
    assert names[0] == "a" and names[2] != names[1]


def test_batch_does_not_replace_an_existing_study_audit_without_force(tmp_path):
    study = _study(tmp_path)
    out = tmp_path / "batch"
    (out / "study").mkdir(parents=True)
    for name, content in OLD.items():
        (out / "study" / name).write_bytes(content)
    (out / "mine.txt").write_text("mine")
    before = snapshot(out, skip=())
    res = runner.invoke(app, ["batch", str(study), "-o", str(out), "--jobs", "1"])
    assert res.exit_code == 2 and "already holds an audit" in _stderr(res), (res.output, res.exception)
    assert snapshot(out, skip=()) == before


def test_batch_refuses_a_folder_that_holds_a_study(tmp_path):
    study = _study(tmp_path)
    before = snapshot(tmp_path / "proj", skip=())
    res = runner.invoke(app, ["batch", str(study), "-o", str(study.parent), "--force"])
    assert res.exit_code == 2 and "input folder" in _stderr(res)
    assert snapshot(tmp_path / "proj", skip=()) == before
