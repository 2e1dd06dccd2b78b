"""Writing outputs atomically: one table or text file, or a whole staged folder."""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from pathlib import Path
from typing import Iterator

import pandas as pd

from ..errors import InputError
from .calendar import period_labels


def write_table(frame: pd.DataFrame, path: str | os.PathLike, *, index: bool = False) -> Path:
    """Write a table as CSV or Parquet (by extension) atomically.

    The table goes to a temporary file in the same folder first and is renamed
    into place, so a failure never leaves a half-written file.

    Examples
    --------
    >>> write_table(pd.DataFrame({"a": [1]}), "out.csv")  # doctest: +SKIP
    """
    target = Path(path)
    suffix = target.suffix.lower()
    if suffix not in (".csv", ".parquet", ".pq"):
        raise InputError(f"{target}: output must end in .csv or .parquet")
    frame = _printable(frame)
    if suffix == ".csv":
        return _write_atomically(target, lambda tmp: _write_csv(frame, tmp, index=index))
    return _write_atomically(target, lambda tmp: frame.to_parquet(tmp, index=index))


def _write_csv(frame: pd.DataFrame, path: str, *, index: bool) -> None:
    """CSV through pyarrow (several times faster than pandas), pandas for what it cannot type."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    try:
        table = pa.Table.from_pandas(frame, preserve_index=index)
    except (pa.ArrowInvalid, pa.ArrowTypeError, TypeError):
        frame.to_csv(path, index=index)
        return
    pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="needed"))


def write_text(text: str, path: str | os.PathLike) -> Path:
    """Write a text file atomically (temporary file, then rename)."""
    return _write_atomically(Path(path), lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))


def _write_atomically(target: Path, write) -> Path:
    """Run ``write(tmp)`` on a temporary file beside ``target``, then rename it into place."""
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    os.close(fd)
    try:
        write(tmp)
        os.chmod(tmp, _plain_file_mode())
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return target


def _plain_file_mode() -> int:
    """Permissions a plain ``open()`` would give (mkstemp makes owner-only files)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _printable(frame: pd.DataFrame) -> pd.DataFrame:
    """Periods as labels that read back to the same calendar."""
    out = frame
    for name in frame.columns:
        if isinstance(frame[name].dtype, pd.PeriodDtype):
            if out is frame:
                out = frame.copy()
            out[name] = period_labels(pd.PeriodIndex(frame[name]))
    return out


@contextlib.contextmanager
def staged_output(out_dir: str | os.PathLike) -> Iterator[Path]:
    """Collect a command's output files in a staging folder, then move them into place.

    Nothing reaches ``out_dir`` unless the whole block succeeds; if moving a
    file into place fails, the files already moved are taken back and the
    files they replaced restored, so ``out_dir`` is left as it was.

    Examples
    --------
    >>> with staged_output("run") as stage:  # doctest: +SKIP
    ...     write_table(table, stage / "audit.csv")
    """
    target = Path(out_dir)
    if target.exists() and not target.is_dir():
        raise InputError(f"--out {target}: exists and is not a folder")
    target.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{target.name}.", dir=target.parent))
    try:
        yield stage
        _move_into(stage, target)
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def _move_into(stage: Path, target: Path) -> None:
    """Move the staged tree into ``target``; if any step fails, undo the steps taken."""
    undo: list = []  # callables, run newest first
    backup = None
    try:
        if not target.exists():
            target.mkdir(parents=True)
            undo.append(lambda: shutil.rmtree(target, ignore_errors=True))
        backup = Path(tempfile.mkdtemp(prefix=f".{target.name}.old.", dir=target.parent))
        _merge(stage, target, backup, undo)
    except BaseException:
        for step in reversed(undo):
            with contextlib.suppress(OSError):
                step()
        raise
    finally:
        if backup is not None:
            shutil.rmtree(backup, ignore_errors=True)


def _merge(source: Path, dest_dir: Path, backup: Path, undo: list) -> None:
    """Move ``source``'s entries into ``dest_dir``; a Parquet dataset folder replaces the old one."""
    for item in sorted(source.iterdir()):
        dest = dest_dir / item.name
        if item.is_dir() and not _is_dataset(item):
            if dest.exists() and not dest.is_dir():
                raise InputError(f"--out {dest}: exists and is not a folder")
            if not dest.exists():
                dest.mkdir()
                undo.append(lambda d=dest: shutil.rmtree(d, ignore_errors=True))
            _merge(item, dest, backup, undo)
            continue
        if dest.exists():
            if dest.is_dir() != item.is_dir():
                kind = "a folder" if dest.is_dir() else "a file"
                raise InputError(f"--out {dest}: exists and is {kind}")
            saved = backup / f"{len(undo)}-{item.name}"
            os.replace(dest, saved)
            undo.append(lambda d=dest, s=saved: os.replace(s, d))
        os.replace(item, dest)
        undo.append(lambda d=dest: _remove(d))


def _remove(path: Path) -> None:
    if path.is_dir():
        shutil.rmtree(path)
    else:
        path.unlink()


def _is_dataset(folder: Path) -> bool:
    return any(p.suffix == ".parquet" for p in folder.iterdir())
