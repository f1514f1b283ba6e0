"""The results folder: built beside its final place and swapped in whole."""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

from ..errors import OutputExistsError
from ..safe_files import PROCESS_UMASK  # the process umask, read once at import


class OutputFolder:
    """Build an output folder beside its final place, then swap it in.

    Use as a context manager: files are written under ``.path`` (a temporary
    folder); on success the old folder (when ``overwrite``) is replaced; on error
    the temporary folder is removed and the old one is left as it was.
    """

    def __init__(self, final: Path, *, overwrite: bool = False):
        self.final = Path(final)
        if self.final.exists() and not overwrite:
            raise OutputExistsError(
                f"the output folder {self.final} already exists; choose another --out or add "
                "--overwrite to replace it."
            )
        if self.final.exists() and not self.final.is_dir():
            raise OutputExistsError(f"{self.final} exists and is not a folder.")
        self.overwrite = overwrite
        self.path: Path | None = None

    def __enter__(self) -> Path:
        self.final.parent.mkdir(parents=True, exist_ok=True)
        self.path = Path(tempfile.mkdtemp(prefix=f".{self.final.name}.", dir=self.final.parent))
        return self.path

    def __exit__(self, exc_type, exc, tb) -> None:
        if self.path is None:
            return
        if exc_type is not None:
            shutil.rmtree(self.path, ignore_errors=True)
            return
        os.chmod(self.path, 0o777 & ~PROCESS_UMASK)
        if self.final.exists():
            old = self.final.with_name(f".{self.final.name}.old")
            shutil.rmtree(old, ignore_errors=True)
            os.replace(self.final, old)
            os.replace(self.path, self.final)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(self.path, self.final)
