"""Output safety end to end: inputs are never touched, only our own folders are replaced,
and a run stopped by a signal leaves the old output or the new one, never a hidden copy."""

import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from calibrate.output.folder import MARKER_FILE, is_tool_output
from tests.helpers import simple_judgments, write_study


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "calibrate", *map(str, args)], capture_output=True,
                          text=True, cwd=cwd, timeout=300)


def tree_hashes(root: Path) -> dict[str, str]:
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


@pytest.fixture()
def study(tmp_path):
    """A small study inside a parent folder that also holds an unrelated folder."""
    spec = write_study(tmp_path / "project" / "study", simple_judgments(n_raters=4, n_cases=12))
    unrelated = tmp_path / "project" / "notes"
    unrelated.mkdir()
    (unrelated / "minutes.txt").write_text("not the tool's")
    return spec


@pytest.mark.parametrize("where", ["study folder", "its parent"])
@pytest.mark.parametrize("overwrite", [False, True])
def test_out_at_the_inputs_is_refused_and_every_input_byte_stays(study, where, overwrite):
    project = study.parent.parent
    before = tree_hashes(project)
    out = study.parent if where == "study folder" else project
    proc = run("audit", study, "--out", out, "--no-pdf", *(["--overwrite"] if overwrite else []))
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "input" in proc.stderr or "already exists" in proc.stderr
    assert tree_hashes(project) == before
    assert sorted(p.name for p in project.parent.iterdir()) == ["project"]


def test_unmarked_folder_refused_marked_one_replaced(study, tmp_path):
    out = tmp_path / "results"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    proc = run("audit", study, "--out", out, "--no-pdf", "--overwrite")
    assert proc.returncode == 2 and MARKER_FILE in proc.stderr
    assert (out / "keep.txt").read_text() == "mine"

    out2 = tmp_path / "results2"
    first = run("audit", study, "--out", out2, "--no-pdf")
    assert first.returncode == 0, first.stderr
    assert is_tool_output(out2)
    again = run("audit", study, "--out", out2, "--no-pdf")
    assert again.returncode == 2 and "--overwrite" in again.stderr
    (out2 / "stale.txt").write_text("from the first run")
    replaced = run("audit", study, "--out", out2, "--no-pdf", "--overwrite")
    assert replaced.returncode == 0, replaced.stderr
    assert is_tool_output(out2) and not (out2 / "stale.txt").exists()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".results")) == []


def test_a_second_run_into_a_locked_target_exits_2(study, tmp_path):
    out = tmp_path / "results"
    (tmp_path / ".results.lock").write_text(f"{os.getpid()}\n")  # a live pid: this test
    proc = run("audit", study, "--out", out, "--no-pdf")
    assert proc.returncode == 2 and "another calibrate run" in proc.stderr
    assert not out.exists()


def test_unwritable_places_exit_2_before_the_analysis(study, tmp_path):
    # Running as root ignores chmod, so provoke the error with a path under /proc and with a
    # file standing where a folder should be.
    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    for out in ("/proc/calibrate-test-out", blocker / "out", blocker):
        proc = run("audit", study, "--out", out, "--no-pdf")
        assert proc.returncode == 2, (out, proc.stderr)
        assert "Traceback" not in proc.stderr
        assert "Audited" not in proc.stdout
    assert blocker.read_text() == "x"


def test_listed_tracebacks_are_now_clear_exit_2(study, tmp_path):
    cases = [
        (["audit", study, "--out", tmp_path / "o", "--seed", "-1"], {}),
        (["audit", study, "--out", "."], {}),
        (["audit", study, "--out", tmp_path / "o"], {"SOURCE_DATE_EPOCH": "99999999999999"}),
        (["init", study.parent / "judgments.csv", "--out", tmp_path, "--force"], {}),
        (["demo", "--out", study], {}),
    ]
    for args, env in cases:
        proc = subprocess.run([sys.executable, "-m", "calibrate", *map(str, args)], capture_output=True,
                              text=True, env={**os.environ, **env}, cwd=tmp_path, timeout=300)
        assert proc.returncode == 2, (args, proc.stderr)
        assert "Traceback" not in proc.stderr, (args, proc.stderr)


def _children(pid: int) -> set[int]:
    found = set()
    for task in Path(f"/proc/{pid}/task").glob("*"):
        try:
            found |= {int(c) for c in (task / "children").read_text().split()}
        except OSError:
            pass
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc to find the workers")
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_a_run_stopped_while_writing_pdfs_leaves_old_or_new_and_no_worker(tmp_path, sig):
    spec = write_study(tmp_path / "study", simple_judgments(n_raters=24, n_cases=12))
    out = tmp_path / "results"
    first = run("audit", spec, "--out", out, "--no-pdf")
    assert first.returncode == 0, first.stderr
    old = tree_hashes(out)

    err_file = tmp_path / "stderr.txt"
    err_handle = err_file.open("w")
    proc = subprocess.Popen([sys.executable, "-m", "calibrate", "audit", str(spec), "--out", str(out),
                             "--overwrite", "--jobs", "2"], stdout=subprocess.DEVNULL,
                            stderr=err_handle, text=True,
                            env={**os.environ, "PYTHONFAULTHANDLER": "1"})
    workers: set[int] = set()
    deadline = time.monotonic() + 240
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            workers |= _children(proc.pid)
            if any(tmp_path.glob(".results.staging-*/raters/*.pdf")):
                break
            time.sleep(0.05)
        else:
            pytest.skip("the run ended before a PDF was seen; nothing to interrupt")
        workers |= _children(proc.pid)
        proc.send_signal(sig)
        proc.wait(timeout=60)
    finally:
        err_handle.close()
        if proc.poll() is None:
            proc.send_signal(signal.SIGABRT)  # with PYTHONFAULTHANDLER: every thread's stack
            proc.wait(timeout=10)
            pytest.fail("the stopped run did not end:\n" + err_file.read_text())
    assert proc.returncode == -sig or proc.returncode == 128 + sig, proc.returncode
    if sig == signal.SIGTERM:
        assert "Traceback" not in err_file.read_text()
    time.sleep(1)
    for _ in range(50):  # SIGKILL: the kernel signals the orphaned workers; give them a moment
        if not any(_alive(w) for w in workers):
            break
        time.sleep(0.1)
    assert workers, "the run started no worker processes"
    assert not any(_alive(w) for w in workers)
    assert tree_hashes(out) == old  # the old output, untouched
    if sig == signal.SIGTERM:
        assert not list(tmp_path.glob(".results.*"))
    err_file.unlink()
    nxt = run("audit", spec, "--out", out, "--no-pdf", "--overwrite")
    assert nxt.returncode == 0, nxt.stderr
    assert not list(tmp_path.glob(".results.*"))  # the killed run's staging folder is gone


@pytest.fixture()
def small_disk(tmp_path):
    """Mount a tmpfs of a given size (and optionally read-only); skipped where mounting is
    not allowed (not root, or no CAP_SYS_ADMIN in a container)."""
    mounted: list[Path] = []

    def mount(size: str, *, read_only: bool = False) -> Path:
        point = tmp_path / f"disk{len(mounted)}"
        point.mkdir()
        proc = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(point)],
                              capture_output=True, text=True)
        if proc.returncode != 0:
            pytest.skip(f"cannot mount a tmpfs here: {proc.stderr.strip()}")
        mounted.append(point)
        if read_only:
            subprocess.run(["mount", "-o", "remount,ro", str(point)], check=True)
        return point

    yield mount
    for point in reversed(mounted):
        subprocess.run(["umount", "-l", str(point)], capture_output=True)


def test_a_read_only_target_exits_2_before_the_analysis(study, small_disk):
    disk = small_disk("4m", read_only=True)
    proc = run("audit", study, "--out", disk / "audit", "--no-pdf")
    assert proc.returncode == 2, proc.stderr
    assert "Read-only" in proc.stderr and "Traceback" not in proc.stderr
    assert "analyses" not in proc.stderr and "Audited" not in proc.stdout
    assert list(disk.iterdir()) == []


@pytest.mark.parametrize("size, words", [("32k", "No space left"), ("600k", "MB free")])
def test_a_full_or_too_small_target_exits_2_before_the_analysis(study, small_disk, size, words):
    disk = small_disk(size)
    proc = run("audit", study, "--out", disk / "audit", "--no-pdf")
    assert proc.returncode == 2, proc.stderr
    assert words in proc.stderr and "Traceback" not in proc.stderr
    assert "Audited" not in proc.stdout
    assert [p.name for p in disk.iterdir()] == []  # no staging folder, no lock, no probe


def test_a_disk_that_fills_while_writing_keeps_the_old_output(study, small_disk):
    from calibrate import audit, load_study, write_audit
    from calibrate.errors import OutputPlaceError

    disk = small_disk("1m")
    out = disk / "audit"
    out.mkdir()
    (out / MARKER_FILE).write_bytes(b'{"tool": "calibrate", "version": "0", "kind": "results"}\n')
    (out / "results.json").write_text("{}\n")
    old = tree_hashes(out)
    free = os.statvfs(disk).f_bavail * os.statvfs(disk).f_frsize
    (disk / "ballast").write_bytes(b"\0" * (free - 80_000))  # room for the probe, not the results
    import warnings

    with warnings.catch_warnings():  # the suite turns warnings into errors; the CLI does not
        warnings.simplefilter("ignore", RuntimeWarning)
        result = audit(load_study(study), n_boot=50)
    with pytest.raises(OutputPlaceError, match="disk is full"):
        write_audit(result, out, overwrite=True, pdf=False)
    assert tree_hashes(out) == old
    assert sorted(p.name for p in disk.iterdir()) == ["audit", "ballast"]
