"""Writing output files safely: atomically, and never over a file without permission."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from ..errors import FileProblems, Problem, display_path

__all__ = ["OutputDir"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


class OutputDir:
    """A folder of outputs.

    Every file is written to a temporary name first and renamed into place, so an interrupt
    never leaves half a file. A file that is already there is only replaced with ``force``.
    """

    def __init__(self, path: str | Path, force: bool = False):
        self.path = Path(path)
        self.force = force
        self.written: list[Path] = []

    def check(self, names: list[str]) -> None:
        """Refuse up front if any of these files exists and ``force`` is not set."""
        if self.force:
            return
        there = [n for n in names if (self.path / n).exists()]
        if there:
            shown = display_path(self.path / there[0])
            more = f" and {len(there) - 1} more" if len(there) > 1 else ""
            raise FileProblems([Problem(shown, 0, "", f"already exists{more}; use --force to replace, or --out for another folder")])

    def write(self, name: str, data: str | bytes) -> Path:
        self.path.mkdir(parents=True, exist_ok=True)
        target = self.path / name
        if target.exists() and not self.force and target not in self.written:
            raise FileProblems([Problem(display_path(target), 0, "", "already exists; use --force to replace it")])
        mode = "wb" if isinstance(data, bytes) else "w"
        fd, tmp = tempfile.mkstemp(prefix=f".{name}.", dir=self.path)
        try:
            with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})) as fh:
                fh.write(data)
            os.chmod(tmp, 0o666 & ~_umask())
            os.replace(tmp, target)
        except BaseException:
            if os.path.exists(tmp):
                os.unlink(tmp)
            raise
        self.written.append(target)
        return target
