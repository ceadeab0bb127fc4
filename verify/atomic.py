"""Atomic output files: written beside the target under a temporary name, then renamed."""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator


class OutputRefused(Exception):
    """An output would overwrite a file that must not be touched (the input workbook)."""


def guard_not_input(target: Path, protected: tuple[Path, ...]) -> None:
    for path in protected:
        if path.exists() and target.exists() and os.path.samefile(target, path):
            raise OutputRefused(f"refusing to overwrite the input file {path}")
        if target.resolve() == path.resolve():
            raise OutputRefused(f"refusing to overwrite the input file {path}")


@contextmanager
def atomic_path(target: Path, protected: tuple[Path, ...] = ()) -> Iterator[Path]:
    """Yield a temporary path in ``target``'s folder; on success it replaces ``target``.

    A crash or an exception leaves ``target`` as it was and removes the
    temporary file, so a reader never sees half an output.
    """
    target = Path(target)
    guard_not_input(target, protected)
    target.parent.mkdir(parents=True, exist_ok=True)
    handle, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(handle)
    temporary = Path(name)
    try:
        yield temporary
        os.replace(temporary, target)
    finally:
        temporary.unlink(missing_ok=True)


def write_text_atomic(target: Path, text: str, protected: tuple[Path, ...] = ()) -> None:
    with atomic_path(target, protected) as temporary:
        temporary.write_text(text, encoding="utf-8")
