"""Atomic output files: written beside the target under a temporary name, then renamed."""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator


class OutputRefused(Exception):
    """An output would overwrite a file that must not be touched (the input workbook)."""


def guard_not_input(target: Path, protected: tuple[Path, ...]) -> None:
    for path in protected:
        same_file = path.exists() and target.exists() and os.path.samefile(target, path)
        if same_file or target.resolve() == path.resolve():
            raise OutputRefused(f"refusing to overwrite the input file {path}")


def _new_temporary(target: Path) -> Path:
    """A fresh file beside ``target``; O_EXCL never writes through an existing file or link,
    and mode 0o666 lets the umask decide the permissions, as for any new file."""
    while True:
        temporary = target.with_name(f".{target.name}.{os.urandom(6).hex()}.part")
        try:
            os.close(os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666))
            return temporary
        except FileExistsError:
            continue


@contextmanager
def atomic_path(target: Path, protected: tuple[Path, ...] = ()) -> Iterator[Path]:
    """Yield a temporary path in ``target``'s folder; on success it replaces ``target``.

    A crash or an exception leaves ``target`` as it was and removes the
    temporary file, so a reader never sees half an output.
    """
    target = Path(target)
    guard_not_input(target, protected)
    target.parent.mkdir(parents=True, exist_ok=True)
    temporary = _new_temporary(target)
    try:
        yield temporary
        os.replace(temporary, target)
    finally:
        temporary.unlink(missing_ok=True)


def write_text_atomic(target: Path, text: str, protected: tuple[Path, ...] = ()) -> None:
    with atomic_path(target, protected) as temporary:
        temporary.write_text(text, encoding="utf-8")


def write_bytes_atomic(target: Path, data: bytes, protected: tuple[Path, ...] = ()) -> None:
    with atomic_path(target, protected) as temporary:
        temporary.write_bytes(data)
