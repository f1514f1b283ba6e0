"""The results folder: built beside its final place and swapped in whole.

Safety rules (why each exists is in DEVELOPERS.md, "Output safety"):

- the tool only ever replaces or deletes a folder that carries its own marker file
  (``.calibrate-output``), so ``--overwrite`` can never remove the study's inputs or
  anything else a person put there;
- a lock file beside the target (created with O_CREAT|O_EXCL, holding the pid) lets one
  run at a time write into a target; a lock left by a dead process is taken over;
- the staging folder carries the marker too, so one left by a killed run is found and
  removed by the next run into the same target;
- the target is tested before any work: not the working folder, not a mount point, not
  equal to or above an input, and its parent is writable.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import tempfile
from pathlib import Path

from ..errors import OutputExistsError, OutputLockedError, OutputPlaceError
from ..safe_files import PROCESS_UMASK  # the process umask, read once at import

MARKER_FILE = ".calibrate-output"
MARKER_TOOL = "calibrate"
KIND_RESULTS = "results"
KIND_STAGING = "staging"
_STAGING_INFIX = ".staging-"
_OLD_INFIX = ".old-"
_ACTIVE_STAGING: set[Path] = set()  # staging folders of this process, for an emergency exit


def remove_active_staging() -> None:
    """Remove this process's staging folders now (the last step before a forced exit)."""
    for path in list(_ACTIVE_STAGING):
        shutil.rmtree(path, ignore_errors=True)
        _ACTIVE_STAGING.discard(path)


def _version() -> str:
    from .. import __version__

    return __version__


def marker_bytes(kind: str) -> bytes:
    """The marker's content: small, fixed JSON (no time, no pid) so reruns give the same bytes."""
    return (json.dumps({"tool": MARKER_TOOL, "version": _version(), "kind": kind}, indent=2)
            + "\n").encode("utf-8")


def read_marker(folder: Path) -> dict | None:
    """The folder's marker as a dict, or None when it has none (or not ours)."""
    path = Path(folder) / MARKER_FILE
    try:
        if path.is_symlink() or not path.is_file():
            return None
        data = json.loads(path.read_text("utf-8"))
    except (OSError, ValueError, UnicodeDecodeError):
        return None
    if not isinstance(data, dict) or data.get("tool") != MARKER_TOOL:
        return None
    return data


def is_tool_output(folder: Path) -> bool:
    """True when ``folder`` is a real folder (not a link) this tool wrote as a results folder."""
    folder = Path(folder)
    if folder.is_symlink() or not folder.is_dir():
        return False
    marker = read_marker(folder)
    return marker is not None and marker.get("kind") == KIND_RESULTS


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # alive, owned by someone else
        return True
    return True


def _is_within(path: Path, ancestor: Path) -> bool:
    try:
        path.relative_to(ancestor)
    except ValueError:
        return False
    return True


def check_output_place(final: Path, *, protect: tuple[Path, ...] = ()) -> Path:
    """Refuse an output place that cannot be, or must not be, a results folder.

    Returns the resolved path. ``protect`` lists input files and folders: the output may
    not be equal to or above any of them (replacing it would delete them).
    """
    raw = Path(final)
    resolved = Path(os.path.abspath(raw))
    resolved = resolved.parent.resolve() / resolved.name if resolved.name else resolved.resolve()
    if not resolved.name or resolved == Path.cwd().resolve() or raw.name in ("", ".", ".."):
        raise OutputPlaceError(
            f"--out {raw} names the current folder (or its parent); the results go into a folder "
            "of their own. Give a new folder name, for example --out reports/audit.")
    if os.path.ismount(resolved):
        raise OutputPlaceError(
            f"--out {raw} is a mount point; a results folder is built beside its final place and "
            "swapped in, which cannot be done at a mount point. Give a folder inside it, for "
            f"example --out {raw / 'audit'}.")
    for item in protect:
        item = Path(os.path.abspath(item)).resolve()
        if item == resolved or _is_within(item, resolved):
            raise OutputPlaceError(
                f"--out {raw} holds the study's input {item}; the results folder must not contain "
                "the inputs (replacing it would delete them). Give a separate folder, for example "
                f"--out {resolved.parent / (resolved.name + '-results')}.")
    if resolved.exists() and (resolved.is_symlink() or not resolved.is_dir()):
        raise OutputPlaceError(f"--out {raw} exists and is not a folder; give a folder name.")
    return resolved


_PROBE_BYTES = 64 * 1024


def _check_writable(parent: Path, shown: Path) -> None:
    """Prove the parent folder can take the results: create it if needed and write a probe."""
    try:
        parent.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(prefix=".calibrate-probe.", dir=parent)
        try:
            block = memoryview(b"\0" * _PROBE_BYTES)  # a full disk often still takes an empty file
            while block:  # a nearly full disk takes part of a write and refuses the rest
                block = block[os.write(fd, block):]
            os.fsync(fd)
        finally:
            os.close(fd)
            os.unlink(probe)
    except OSError as exc:
        raise OutputPlaceError(
            f"cannot write into {parent} (for --out {shown}): {exc.strerror or exc}. Choose a "
            "folder you can write to, or free space / fix permissions there.") from None


class OutputLock:
    """A lock file beside the target: ``.<name>.lock`` holding the pid of the run."""

    def __init__(self, final: Path):
        self.final = Path(final)
        self.path = self.final.with_name(f".{self.final.name}.lock")
        self.held = False

    def acquire(self) -> None:
        for _ in range(3):
            try:
                fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                if self._stale():
                    try:
                        os.unlink(self.path)
                    except FileNotFoundError:
                        pass
                    continue
                raise OutputLockedError(
                    f"another calibrate run (pid {self._owner()}) is writing into {self.final}; "
                    f"wait for it to finish, or choose another --out. If no such run exists, "
                    f"delete the lock file {self.path}.") from None
            except OSError as exc:
                raise OutputPlaceError(
                    f"cannot create the lock file {self.path}: {exc.strerror or exc}.") from None
            with os.fdopen(fd, "w") as fh:
                fh.write(f"{os.getpid()}\n")
            self.held = True
            return
        raise OutputLockedError(f"could not take the lock {self.path}; try again.")

    def _owner(self) -> int | None:
        try:
            return int(self.path.read_text().strip())
        except (OSError, ValueError):
            return None

    def _stale(self) -> bool:
        owner = self._owner()
        if owner is None:
            # Unreadable or empty: a run may be between creating and writing it; only a lock
            # older than a minute is treated as left behind.
            try:
                import time

                return time.time() - self.path.stat().st_mtime > 60
            except OSError:
                return True
        return owner != os.getpid() and not _pid_alive(owner)

    def release(self) -> None:
        if self.held:
            self.held = False
            if self._owner() == os.getpid():
                try:
                    os.unlink(self.path)
                except FileNotFoundError:
                    pass


def leftovers(final: Path) -> list[Path]:
    """Staging and old folders of earlier runs into ``final`` that carry our marker."""
    final = Path(final)
    parent = final.parent
    if not parent.is_dir():
        return []
    found = []
    for prefix in (f".{final.name}{_STAGING_INFIX}", f".{final.name}{_OLD_INFIX}"):
        for path in sorted(parent.glob(prefix + "*")):
            if path.is_dir() and not path.is_symlink() and read_marker(path) is not None:
                found.append(path)
    return found


class OutputFolder:
    """Build an output folder beside its final place, then swap it in.

    Use as a context manager: files are written under the returned path (a staging
    folder beside the target); on success the target is replaced (only when
    ``overwrite`` and it carries the marker); on any error or signal the staging folder
    is removed and the old folder is left as it was. The lock is held from ``__enter__``
    to the end, so wrap the whole analysis in it to refuse a second run early.
    """

    def __init__(self, final: Path, *, overwrite: bool = False, protect: tuple[Path, ...] = ()):
        self.shown = Path(final)
        self.final = check_output_place(final, protect=tuple(protect))
        self.overwrite = overwrite
        self.existed = self.final.exists()
        self._refuse_existing()
        self.path: Path | None = None
        self._lock = OutputLock(self.final)

    def _refuse_existing(self) -> None:
        if not self.final.exists():
            return
        if not self.overwrite:
            raise OutputExistsError(
                f"the output folder {self.shown} already exists; choose another --out or add "
                "--overwrite to replace it.")
        if not is_tool_output(self.final):
            raise OutputExistsError(
                f"the folder {self.shown} was not written by calibrate (it has no {MARKER_FILE} "
                "marker), so --overwrite will not replace it: it may hold your inputs or other "
                "files. Choose another --out, or move that folder away yourself.")

    def __enter__(self) -> Path:
        _check_writable(self.final.parent, self.shown)
        self._lock.acquire()
        try:
            for old in leftovers(self.final):  # we hold the lock: these runs are dead
                shutil.rmtree(old, ignore_errors=True)
            self.path = Path(tempfile.mkdtemp(prefix=f".{self.final.name}{_STAGING_INFIX}",
                                              dir=self.final.parent))
            _ACTIVE_STAGING.add(self.path)
            (self.path / MARKER_FILE).write_bytes(marker_bytes(KIND_STAGING))
        except BaseException as exc:
            self._cleanup()
            if isinstance(exc, OSError):
                raise write_failure(exc, self.shown) from None
            raise
        return self.path

    def _cleanup(self) -> None:
        try:
            if self.path is not None:
                shutil.rmtree(self.path, ignore_errors=True)
                _ACTIVE_STAGING.discard(self.path)
                self.path = None
        finally:
            self._lock.release()

    def __exit__(self, exc_type, exc, tb) -> None:
        if self.path is None:
            self._lock.release()
            return
        if exc_type is not None:
            self._cleanup()  # the error (or signal) itself propagates unchanged
            return
        try:
            self._swap()
        except BaseException as err:
            self._cleanup()
            if isinstance(err, OSError):
                raise write_failure(err, self.shown) from None
            raise
        self._lock.release()

    def _swap(self) -> None:
        assert self.path is not None
        if self.final.exists() and not self.existed and not self.overwrite:
            raise OutputExistsError(
                f"the folder {self.shown} appeared while the audit ran; it was left as it is and "
                "the new results were not written. Choose another --out, or add --overwrite.")
        self._refuse_existing()  # the folder may have been replaced by something else meanwhile
        (self.path / MARKER_FILE).write_bytes(marker_bytes(KIND_RESULTS))
        os.chmod(self.path, 0o777 & ~PROCESS_UMASK)
        staged, self.path = self.path, None
        _ACTIVE_STAGING.discard(staged)
        if self.final.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{self.final.name}{_OLD_INFIX}",
                                        dir=self.final.parent))
            os.rmdir(old)
            os.replace(self.final, old)
            try:
                os.replace(staged, self.final)
            except BaseException:
                os.replace(old, self.final)  # put the old output back
                self.path = staged
                _ACTIVE_STAGING.add(staged)
                raise
            shutil.rmtree(old, ignore_errors=True)  # marked: checked by _refuse_existing
        else:
            try:
                os.rename(staged, self.final)
            except OSError as exc:
                self.path = staged
                _ACTIVE_STAGING.add(staged)
                if exc.errno in (errno.EEXIST, errno.ENOTEMPTY):
                    raise OutputExistsError(
                        f"the folder {self.shown} appeared while the audit ran; it was left as it "
                        "is. Choose another --out.") from None
                raise


def write_failure(exc: OSError, shown: Path) -> OutputPlaceError:
    """The user-facing error for a failed write of the results (full disk, read-only...)."""
    what = exc.strerror or str(exc)
    hint = ("the disk is full; free some space" if exc.errno == errno.ENOSPC else
            "the place is read-only or not yours; choose a folder you can write to"
            if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM) else "check the folder")
    return OutputPlaceError(
        f"writing the results into {shown} failed ({what}); nothing was replaced and any "
        f"earlier results there are as they were. Fix: {hint}, then run again.")
