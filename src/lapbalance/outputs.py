"""Atomic output writing: nothing the user has is overwritten or left half-written.

Files are written to a temporary file in the target folder and renamed into place
(``os.replace`` is atomic on one filesystem). Output folders are filled in a temporary
sibling folder and swapped in at the end, so an interrupted run leaves the old folder intact.
"""

from __future__ import annotations

import csv
import io
import json
import os
import shutil
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path

from lapbalance.errors import InputError


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _default_mode(directory: bool = False) -> int:
    """Mode a plain ``open()``/``mkdir()`` would give (0666/0777 minus the umask); temporary
    files are created private and get this mode before they are renamed into place."""
    return (0o777 if directory else 0o666) & ~_umask()


def write_bytes_atomic(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file and an atomic rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, _default_mode())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def write_json_atomic(path: str | Path, obj) -> Path:
    """Write ``obj`` as indented JSON atomically."""
    return write_text_atomic(path, json.dumps(obj, indent=2, allow_nan=False) + "\n")


def csv_text(header: Sequence[str], rows: Iterable[Sequence]) -> str:
    """Render rows as CSV text (floats with repr precision, no index)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for row in rows:
        w.writerow(row)
    return buf.getvalue()


def columns_csv_text(columns: Mapping[str, Sequence], float_fmt: str = "{:.6g}") -> str:
    """Render a mapping of equal-length columns as CSV text."""
    names = list(columns)
    n = len(columns[names[0]]) if names else 0
    cols = []
    for name in names:
        col = columns[name]
        out = []
        for v in col:
            if isinstance(v, float) or hasattr(v, "dtype") and getattr(v.dtype, "kind", "") == "f":
                out.append(float_fmt.format(float(v)))
            else:
                out.append(str(v))
        cols.append(out)
    rows = ([c[i] for c in cols] for i in range(n))
    return csv_text(names, rows)


def check_output_dir(path: str | Path, force: bool, option: str = "--out") -> Path:
    """Refuse to overwrite a non-empty existing folder unless ``force``."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise InputError(f"{path} exists and is not a folder; choose another {option}", option)
    if path.is_dir() and any(path.iterdir()) and not force:
        raise InputError(
            f"{path} already holds results; pass --force to replace them or choose another "
            f"{option}",
            option,
        )
    return path


@contextmanager
def staged_dir(path: str | Path, force: bool = False, option: str = "--out"):
    """Yield a temporary folder beside ``path``; on success swap it in place of ``path``.

    If the body raises (or the process is interrupted), ``path`` is left exactly as it was.
    """
    path = Path(path)
    check_output_dir(path, force, option)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent))
    os.chmod(tmp, _default_mode(directory=True))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if path.exists():
        old = path.with_name(f".{path.name}.old-{os.getpid()}")
        os.replace(path, old)
    os.replace(tmp, path)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
