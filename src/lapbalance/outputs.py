"""Output safety: atomic writers, output folders lapbalance owns, and one-line path faults.

Rules (README "Output folders and files"):

* **Files** are written to a temporary file beside the target and renamed into place
  (``os.replace`` is atomic on one filesystem): a reader never sees half a file.
* **Output folders** belong to lapbalance only if lapbalance made them: every folder it fills
  holds a manifest (:data:`MANIFEST`) listing the files it wrote. ``--force`` replaces such a
  folder's listed files and nothing else; a folder holding anything lapbalance did not write
  is refused (with or without ``--force``), naming what is in it.
* **Reservation**: a run takes the folder at its start with an exclusive lock file
  (:data:`LOCK`, ``O_CREAT|O_EXCL``, holding the run's pid), so a second run on the same
  folder is refused at once, and an unwritable folder fails before any lap is run. The new
  files are staged in a hidden folder inside it (:data:`STAGING_PREFIX` + pid) and renamed
  into place only when all of them are complete; an interrupted run leaves the old results
  as they were. The lock and staging folder of a run that was killed (its pid is gone) are
  cleared by the next run.
* **Single output files** (``report --out``, ``tunnel --out``, ``track --map``): a file that
  exists is replaced only with ``--force`` (the user names that exact file), never when it is
  one of the run's own inputs, and never when it is a folder. They are reserved with a lock
  file beside them (``.NAME.lapbalance-lock``) the same way.
* **Path faults** (read-only disk, disk full, permission, a file where a folder should be...)
  become one :class:`~lapbalance.errors.InputError` line naming the path, what failed and the
  fix (:func:`os_error_line`), and leave nothing behind.
"""

from __future__ import annotations

import csv
import errno
import io
import json
import os
import re
import shutil
import socket
import tempfile
import time
from collections.abc import Iterable, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path

from lapbalance.errors import InputError, clip

#: Manifest inside every output folder lapbalance fills: the files it wrote there.
MANIFEST = ".lapbalance-manifest.json"
#: Lock file held inside an output folder while a run writes it (holds the run's pid).
LOCK = ".lapbalance.lock"
#: Prefix of the hidden staging folder (inside the output folder) of a running write.
STAGING_PREFIX = ".lapbalance-staging-"
#: Marker of folders written by ``lapbalance demo`` before manifests existed.
LEGACY_DEMO_MARKER = ".lapbalance-demo"
_OWN_NAMES = (MANIFEST, LOCK, LEGACY_DEMO_MARKER)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _default_mode(directory: bool = False) -> int:
    """Mode a plain ``open()``/``mkdir()`` would give (0666/0777 minus the umask); temporary
    files are created private and get this mode before they are renamed into place."""
    return (0o777 if directory else 0o666) & ~_umask()


# --------------------------------------------------------------------------------------------
# OS errors -> one line
# --------------------------------------------------------------------------------------------

_FIX = {
    errno.ENOSPC: "free some space or choose a folder on another disk",
    errno.EDQUOT: "free some space or choose another folder",
    errno.EROFS: "choose a folder on a writable disk",
    errno.EACCES: "choose a folder you can write to or fix its permissions",
    errno.EPERM: "choose a folder you can write to or fix its permissions",
    errno.ENOTDIR: "a part of the path is a file, not a folder; check the path",
    errno.EISDIR: "it is a folder; give a file name",
    errno.ENAMETOOLONG: "give a shorter path",
    errno.ENOENT: "a folder on the way does not exist; check the path",
    errno.EEXIST: "something else is already there; choose another name",
    errno.ELOOP: "the path loops through symbolic links; check the path",
    errno.EMFILE: "close other programs and retry",
    errno.EIO: "check the disk",
    errno.EXDEV: "choose a folder on one disk",
    errno.ENOTEMPTY: "choose an empty or new folder",
}


def os_error_line(e: OSError, what: str = "write", path: str | Path | None = None) -> str:
    """One line for an OS error on a path: ``PATH: cannot WHAT (reason); fix``.

    Lock, staging and temporary names are reported as the output the user named.
    """
    where = path if path is not None else (e.filename if e.filename is not None else "")
    where = _user_path(str(where))
    reason = (e.strerror or type(e).__name__).lower()
    fix = _FIX.get(e.errno, "check the path and the disk")
    where = clip(where, 160)
    return f"{where}: cannot {what} ({reason}); {fix}" if where else \
        f"cannot {what} ({reason}); {fix}"


def _user_path(where: str) -> str:
    """The output path the user gave, for a lock/staging/temporary path below it."""
    p = Path(where)
    parts = p.parts
    for i, part in enumerate(parts):
        if part in (LOCK, MANIFEST) or part.startswith(STAGING_PREFIX):
            return str(Path(*parts[:i])) if i else "."
    name = p.name
    if name.startswith(".") and name.endswith(".lapbalance-lock"):
        return str(p.with_name(name[1:-len(".lapbalance-lock")]))
    if name.startswith(".") and name.endswith(".tmp") and name.count(".") >= 3:
        return str(p.with_name(name[1:].rsplit(".", 2)[0]))
    return where


def os_input_error(e: OSError, what: str = "write", path: str | Path | None = None,
                   option: str | None = None) -> InputError:
    """An :class:`InputError` (one line, exit 2) for an OS error on an output path."""
    return InputError(os_error_line(e, what, path), option)


# --------------------------------------------------------------------------------------------
# atomic single files
# --------------------------------------------------------------------------------------------


def _make_parents(folder: Path) -> list[Path]:
    """Create ``folder`` and missing parents; return the folders created (deepest last)."""
    made = []
    p = folder
    missing = []
    while not p.exists():
        missing.append(p)
        if p.parent == p:
            break
        p = p.parent
    for d in reversed(missing):
        try:
            d.mkdir()
        except FileExistsError:
            continue
        made.append(d)
    return made


def _remove_empty(folders: Sequence[Path]) -> None:
    for d in reversed(list(folders)):
        try:
            d.rmdir()
        except OSError:
            pass


def write_bytes_atomic(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file and an atomic rename.

    On any failure (disk full, interrupt...) the old file is kept and neither the temporary
    file nor a folder created for it is left behind.
    """
    path = Path(path)
    made = _make_parents(path.parent)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, _default_mode())
        os.replace(tmp, path)
    except BaseException:
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)
        _remove_empty(made)
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


def columns_csv_text(columns: Mapping[str, Sequence], float_fmt: str = "{:.6g}",
                     nan: str = "nan") -> str:
    """Render a mapping of equal-length columns as CSV text (non-finite floats as ``nan``)."""
    names = list(columns)
    n = len(columns[names[0]]) if names else 0
    fmt = float_fmt.format
    special = re.compile(r'[,"\r\n]')
    # floats formatted this way never need quoting unless the format or the NaN text does
    floats_plain = not special.search(fmt(-1234567.891) + fmt(float("inf")) + nan)
    cols = []
    plain = len(names) > 1 and not any(special.search(v) for v in names)
    for name in names:
        col = columns[name]
        dtype = getattr(col, "dtype", None)
        if dtype is not None and dtype.kind == "f" and getattr(col, "ndim", 0) == 1:
            # the common case, a float channel: one conversion to Python floats, no per-value
            # type checks (the same text as below)
            cols.append([fmt(f) if f == f else nan for f in col.tolist()])
            plain = plain and floats_plain
            continue
        out = []
        for v in col:
            if isinstance(v, float) or hasattr(v, "dtype") and getattr(v.dtype, "kind", "") == "f":
                f = float(v)
                out.append(fmt(f) if f == f else nan)
            else:
                out.append(str(v))
        plain = plain and not any(special.search(v) for v in out)
        cols.append(out)
    if plain:
        # nothing to quote (and more than one column, so no row is a lone empty cell): the
        # text csv.writer would write, joined directly
        return "\n".join([",".join(names), *(",".join(r) for r in zip(*cols))]) + "\n"
    rows = ([c[i] for c in cols] for i in range(n))
    return csv_text(names, rows)


def check_free_space(folder: str | Path, need_bytes: int, option: str = "--out",
                     shown: str | Path | None = None) -> None:
    """Refuse at the start when ``folder``'s disk has less than ``need_bytes`` free (the
    outputs would not fit; better to say so before any lap runs)."""
    if not need_bytes:
        return
    try:
        st = os.statvfs(folder)
    except (OSError, AttributeError):
        return
    free = st.f_bavail * st.f_frsize
    if free < need_bytes:
        raise InputError(f"{clip(str(shown or folder), 160)}: cannot write (no space left on "
                         f"device: {_size(free)} free, the output needs about "
                         f"{_size(need_bytes)}); free some space or choose a folder on "
                         "another disk", option)


def _size(n: float) -> str:
    for unit in ("bytes", "kB", "MB", "GB"):
        if n < 1000 or unit == "GB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.3g} {unit}"
        n /= 1000.0
    return f"{n:.3g} GB"  # pragma: no cover


# --------------------------------------------------------------------------------------------
# locks
# --------------------------------------------------------------------------------------------


def _start_time(pid: int) -> str | None:
    """Start time of process ``pid`` (Linux /proc; None elsewhere), to tell a reused pid."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as fh:
            stat = fh.read().decode("ascii", "replace")
        return stat.rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return None


def _alive(info: Mapping) -> bool:
    """True if the process that wrote lock ``info`` may still be running."""
    try:
        pid = int(info.get("pid", 0))
    except (TypeError, ValueError):
        return False
    if pid <= 0:
        return False
    if info.get("host") not in (None, socket.gethostname()):
        return True  # another machine's run (shared disk): cannot tell, assume alive
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    start = info.get("start")
    if start is not None:
        now = _start_time(pid)
        if now is not None and now != start:
            return False  # the pid was reused by another process
    return True


def _read_lock(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}


def _lock_info(command: str) -> dict:
    return {"pid": os.getpid(), "start": _start_time(os.getpid()),
            "host": socket.gethostname(), "command": command}


def _take_lock(lock: Path, command: str, target: Path, option: str) -> None:
    """Create ``lock`` exclusively; clear it when its process is gone; refuse if alive."""
    data = (json.dumps(_lock_info(command)) + "\n").encode()
    for attempt in range(3):
        try:
            fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            info = _read_lock(lock)
            if not info:  # being written this very moment, or garbage of a killed run
                try:
                    age = abs(os.path.getmtime(lock) - time.time())
                except OSError:
                    continue
                if age < 5.0 and attempt < 2:
                    time.sleep(0.2)
                    continue
            if info and _alive(info):
                raise InputError(
                    f"{clip(str(target), 160)} is being written by another lapbalance run "
                    f"(pid {info.get('pid')}, {info.get('command') or 'lapbalance'}); wait for "
                    f"it to finish or choose another {option}", option) from None
            # stale: move it aside atomically, check we moved the stale one, then retry
            aside = lock.with_name(f"{lock.name}.stale-{os.getpid()}")
            try:
                os.replace(lock, aside)
            except FileNotFoundError:
                continue
            moved = _read_lock(aside)
            if moved and _alive(moved):  # another run took over in between: give it back
                try:
                    os.link(aside, lock)
                except OSError:
                    pass
                aside.unlink(missing_ok=True)
                raise InputError(
                    f"{clip(str(target), 160)} is being written by another lapbalance run "
                    f"(pid {moved.get('pid')}); wait for it to finish or choose another "
                    f"{option}", option) from None
            aside.unlink(missing_ok=True)
            continue
        try:
            os.write(fd, data)
        finally:
            os.close(fd)
        return
    raise InputError(f"{clip(str(target), 160)}: cannot take the lock {lock.name}; if no "
                     f"lapbalance run is writing there, delete {lock}", option)


# --------------------------------------------------------------------------------------------
# output folders
# --------------------------------------------------------------------------------------------


def read_manifest(folder: str | Path) -> dict | None:
    """The manifest of an output folder lapbalance wrote, or None."""
    p = Path(folder) / MANIFEST
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("written_by") != "lapbalance" \
            or not isinstance(data.get("files"), list):
        return None
    # only plain relative names inside the folder count (a damaged or hand-edited manifest
    # can never make --force reach outside the folder)
    data["files"] = [f for f in data["files"] if _safe_name(f)]
    return data


def _safe_name(f) -> bool:
    if not isinstance(f, str) or not f or "\x00" in f or "\\" in f:
        return False
    p = Path(f)
    return not p.is_absolute() and ".." not in p.parts and "." not in p.parts \
        and p.parts[0] not in _OWN_NAMES and not p.parts[0].startswith(STAGING_PREFIX)


def _legacy_demo_files(folder: Path) -> list[str] | None:
    if not (folder / LEGACY_DEMO_MARKER).is_file():
        return None
    return ["channels.csv", "corners.csv", "summary.json", "tunnel_corrected.csv",
            "report.html"]


def _is_own(name: str) -> bool:
    return name in _OWN_NAMES or name.startswith(STAGING_PREFIX) or \
        name.startswith(LOCK + ".stale-")


def foreign_entries(folder: str | Path, listed: Iterable[str] = ()) -> list[str]:
    """Entries of ``folder`` lapbalance did not write (not in ``listed``; relative paths,
    sub-folders with a trailing ``/``), sorted; stops after 1000."""
    folder = Path(folder)
    listed = set(listed)
    dirs = {str(Path(f).parent) for f in listed if str(Path(f).parent) != "."}
    for d in list(dirs):
        parts = Path(d).parts
        dirs.update(str(Path(*parts[:k])) for k in range(1, len(parts)))
    out: list[str] = []

    def walk(d: Path, rel: str) -> None:
        try:
            entries = sorted(os.scandir(d), key=lambda e: e.name)
        except OSError:
            return
        for e in entries:
            name = f"{rel}{e.name}"
            if not rel and _is_own(e.name):
                continue
            if _temp_of(name, listed) and e.is_file(follow_symlinks=False):
                continue  # a temporary file of an atomic write cut short by a kill
            if e.is_dir(follow_symlinks=False):
                if name in dirs:
                    walk(Path(e.path), name + "/")
                else:
                    out.append(name + "/")
            elif name not in listed or e.is_symlink():
                out.append(name)
            if len(out) >= 1000:
                return

    walk(folder, "")
    return out


_TEMP = re.compile(r"(?:(.*)/)?\.(.+)\.[a-z0-9_]{8}\.tmp")


def _temp_of(rel: str, listed) -> bool:
    """True for ``.NAME.xxxxxxxx.tmp`` (a temporary of :func:`write_bytes_atomic`) where NAME
    is a listed file or the manifest."""
    m = _TEMP.fullmatch(rel)
    if not m:
        return False
    target = f"{m.group(1)}/{m.group(2)}" if m.group(1) else m.group(2)
    return target in listed or target == MANIFEST


def _describe(names: Sequence[str], limit: int = 3) -> str:
    shown = ", ".join(clip(n, 40) for n in names[:limit])
    more = ", ..." if len(names) > limit else ""
    count = f"{len(names)}{'+' if len(names) >= 1000 else ''}"
    noun = "entry" if len(names) == 1 else "entries"
    if all(not n.endswith("/") for n in names):
        noun = "file" if len(names) == 1 else "files"
    return f"{count} {noun} lapbalance did not write ({shown}{more})"


def _same_file(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def _inside(child: Path, parent: Path) -> bool:
    try:
        c, p = child.resolve(), parent.resolve()
    except OSError:
        return False
    return c == p or p in c.parents


class OutputFolder:
    """An output folder taken for one run (see the module docstring for the rules).

    Use :func:`output_folder` (a context manager) rather than this class directly.

    Parameters
    ----------
    path : str or Path
        The folder (created if missing; ``.`` is fine).
    force : bool
        Replace an earlier lapbalance result there (only the files its manifest lists).
    option : str
        Option name for messages (``--out``).
    command : str
        Command name, recorded in the manifest and the lock.
    inputs : iterable of paths
        The run's input files; a folder holding one of them is refused.
    resume : bool
        Accept an earlier lapbalance result without ``force`` (the sweep resumes from it).
    """

    def __init__(self, path, force: bool = False, option: str = "--out",
                 command: str = "lapbalance", inputs: Iterable = (), resume: bool = False,
                 need_bytes: int = 0):
        self.path = Path(path)
        self.need_bytes = need_bytes
        self.force = force
        self.option = option
        self.command = command
        self.inputs = [Path(p) for p in inputs if p is not None]
        self.resume = resume
        self.created: list[Path] = []
        self.staging: Path | None = None
        self.previous: list[str] = []
        self.previous_command: str | None = None
        self.adopted: set[str] = set()
        self.hashes: dict[str, str] = {}
        self._locked = False

    # -- checks --------------------------------------------------------------------------
    def _name(self) -> str:
        return clip(str(self.path), 160)

    def check(self) -> None:
        """Refuse the folder if it is not ours to write (no writes are made)."""
        p = self.path
        if p.is_symlink() and not p.exists():
            raise InputError(f"{self._name()} is a broken symbolic link; choose another "
                             f"{self.option}", self.option)
        if p.exists() and not p.is_dir():
            raise InputError(f"{self._name()} exists and is not a folder; choose another "
                             f"{self.option}", self.option)
        if not p.exists():
            self.previous = []
            return
        man = read_manifest(p)
        listed = list(man["files"]) if man else (_legacy_demo_files(p) or [])
        self.previous_command = man.get("command") if man else (
            "demo" if listed else None)
        foreign = foreign_entries(p, listed)
        if foreign:
            raise InputError(f"{self._name()} holds {_describe(foreign)}: choose an empty or "
                             f"new folder for {self.option}", self.option)
        for f in self.inputs:
            if _inside(f, p):
                raise InputError(f"{self._name()} holds {clip(f.name, 60)}, an input of this "
                                 f"run; choose an empty or new folder for {self.option}",
                                 self.option)
        present = [f for f in listed if (p / f).exists()]
        self.previous = present
        sums = man.get("sha256") if man and isinstance(man.get("sha256"), dict) else {}
        self.hashes = {f: sums[f] for f in present if isinstance(sums.get(f), str)}
        if present and (self.force or self.resume):
            changed = [f for f, h in self.hashes.items() if _sha256(p / f) != h]
            if changed:
                raise InputError(f"{self._name()}: {_describe_changed(changed)} changed since "
                                 "lapbalance wrote it; move it elsewhere to keep it, or choose "
                                 f"another {self.option}", self.option)
        if present and not (self.force or self.resume):
            by = f" (written by lapbalance {self.previous_command})" \
                if self.previous_command else ""
            raise InputError(f"{self._name()} already holds results; pass --force to replace "
                             f"them or choose another {self.option}{by}", self.option)

    # -- life cycle ----------------------------------------------------------------------
    def reserve(self) -> OutputFolder:
        """Check, create and lock the folder and make the staging folder (at the start)."""
        try:
            self.check()
        except OSError as e:  # e.g. a name too long to look up
            raise os_input_error(e, "use the output folder", e.filename or self.path,
                                 self.option) from None
        try:
            self.created = _make_parents(self.path)
            _take_lock(self.path / LOCK, self.command, self.path, self.option)
            self._locked = True
            self.check()  # again, now that no other run can change it
            check_free_space(self.path, self.need_bytes, self.option)
            self._clear_stale_staging()
            self.staging = self.path / f"{STAGING_PREFIX}{os.getpid()}"
            if self.staging.exists():
                shutil.rmtree(self.staging)
            self.staging.mkdir()
            os.chmod(self.staging, 0o700)
        except OSError as e:
            self.abort()
            raise os_input_error(e, "write in the output folder", e.filename or self.path,
                                 self.option) from None
        except BaseException:
            self.abort()
            raise
        return self

    def _clear_stale_staging(self) -> None:
        """Remove staging folders of earlier runs (we hold the lock, so they are stale), and
        the hidden sibling staging folders that versions before manifests left behind."""
        for e in os.scandir(self.path):
            if e.name.startswith(STAGING_PREFIX) and e.is_dir(follow_symlinks=False):
                shutil.rmtree(e.path, ignore_errors=True)
            elif e.name.startswith(LOCK + ".stale-"):
                Path(e.path).unlink(missing_ok=True)
        man = read_manifest(self.path)
        listed = set(man["files"]) if man else set()
        for root, _dirs, files in os.walk(self.path):
            for f in files:
                rel = str((Path(root) / f).relative_to(self.path))
                if _temp_of(rel, listed):
                    (Path(root) / f).unlink(missing_ok=True)
        _clear_legacy_siblings(self.path)

    def _write_manifest(self, files: Iterable[str]) -> None:
        from lapbalance.version import __version__

        files = sorted(set(files))
        sums = {f: self.hashes[f] for f in files if self.hashes.get(f)}
        write_json_atomic(self.path / MANIFEST, {
            "written_by": "lapbalance", "version": __version__, "command": self.command,
            "note": "lapbalance wrote the files listed here and may replace them with "
                    "--force (unless they were changed since); it refuses a folder holding "
                    "anything else",
            "files": files, "sha256": sums,
        })

    def adopt(self, names: Iterable[str]) -> None:
        """In-place writing (the sweep): record ``names`` in the manifest before they are
        written straight into the folder."""
        names = set(names)
        if names - self.adopted:
            self.adopted |= names
            self._write_manifest(set(self.previous) | self.adopted)

    def discard_adopted(self, keep: Iterable[str] = ()) -> None:
        """Remove the files :meth:`adopt` recorded that were not there before (except
        ``keep``); the manifest then lists the earlier files and ``keep`` (or goes)."""
        keep = set(keep) & self.adopted
        for f in sorted(self.adopted - set(self.previous) - keep):
            try:
                (self.path / f).unlink(missing_ok=True)
            except OSError:
                pass
        if self.adopted:
            try:
                if self.previous or keep:
                    self._write_manifest(set(self.previous) | keep)
                else:
                    (self.path / MANIFEST).unlink(missing_ok=True)
            except OSError:
                pass
        self.adopted = keep

    def commit(self) -> None:
        """Move the staged files into place, drop files of the previous result that this run
        did not write again, write the manifest, release the lock."""
        try:
            new = []
            if self.staging is not None:
                for root, _dirs, files in os.walk(self.staging):
                    for f in files:
                        new.append(str((Path(root) / f).relative_to(self.staging)))
            new_set = set(new) | self.adopted
            old = set(self.previous)
            for f in new:
                self.hashes[f] = _sha256(self.staging / f)
            for f in self.adopted:  # written in place (a log that grows): no fixed sum
                self.hashes.pop(f, None)
            if new or self.adopted:
                self._write_manifest(old | new_set)  # a kill from here on leaves it listed
            for f in sorted(new):
                dst = self.path / f
                dst.parent.mkdir(parents=True, exist_ok=True)
                os.replace(self.staging / f, dst)
            drop = old - new_set if (self.force or not self.adopted) else set()
            for f in sorted(drop):
                (self.path / f).unlink(missing_ok=True)
                _remove_empty([self.path / q for q in _parents_of(f)])
            if new_set or old - drop:
                self._write_manifest(new_set | (old - drop))
        except OSError as e:
            self.abort(keep=True)
            raise os_input_error(e, "write in the output folder", e.filename or self.path,
                                 self.option) from None
        except BaseException:
            self.abort(keep=True)
            raise
        self._release()

    def _release(self) -> None:
        if self.staging is not None:
            shutil.rmtree(self.staging, ignore_errors=True)
            self.staging = None
        if self._locked:
            (self.path / LOCK).unlink(missing_ok=True)
            self._locked = False

    def abort(self, keep: bool = False) -> None:
        """Remove the staging folder and the lock; remove the folder if this run made it and
        it is empty (``keep``: a commit had started, keep what was moved)."""
        self._release()
        if not keep:
            _remove_empty(self.created)


#: Files the sibling staging folders of earlier versions held (``.NAME.xxxxxxxx.tmp``).
_LEGACY_FILES = re.compile(r"(channels\.csv|corners\.csv|summary\.json|tunnel_corrected\.csv|"
                           r"report\.html|\.lapbalance-demo|(compare|corners)_[\w.-]+\.csv|"
                           r"[\w.-]+\.png)")


def _clear_legacy_siblings(folder: Path, min_age_s: float = 60.0) -> None:
    """Remove ``.NAME.xxxxxxxx.tmp`` / ``.NAME.old-PID`` siblings of ``folder`` that hold only
    lapbalance result files and were last changed over ``min_age_s`` ago (a killed run of an
    earlier version); anything else there is left alone."""
    try:
        parent = folder.resolve().parent
        name = folder.resolve().name
        entries = list(os.scandir(parent))
    except OSError:
        return
    pat = re.compile(rf"\.{re.escape(name)}\.([a-z0-9_]{{8}}\.tmp|old-\d+)")
    now = time.time()
    for e in entries:
        if not pat.fullmatch(e.name) or not e.is_dir(follow_symlinks=False):
            continue
        try:
            inner = list(os.scandir(e.path))
            young = now - e.stat(follow_symlinks=False).st_mtime < min_age_s
        except OSError:
            continue
        if young or not all(x.is_file(follow_symlinks=False) and _LEGACY_FILES.fullmatch(x.name)
                            for x in inner):
            continue
        shutil.rmtree(e.path, ignore_errors=True)


def _sha256(path: Path) -> str | None:
    import hashlib

    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    except OSError:
        return None
    return h.hexdigest()


def _describe_changed(names: Sequence[str]) -> str:
    shown = ", ".join(clip(n, 40) for n in names[:3]) + (", ..." if len(names) > 3 else "")
    return f"{shown} was" if len(names) == 1 else f"{len(names)} files ({shown}) were"


def _parents_of(rel: str) -> list[str]:
    parts = Path(rel).parts[:-1]
    return [str(Path(*parts[:k])) for k in range(1, len(parts) + 1)]


@contextmanager
def output_folder(path, force: bool = False, option: str = "--out",
                  command: str = "lapbalance", inputs: Iterable = (), resume: bool = False,
                  need_bytes: int = 256_000):
    """Take output folder ``path`` for one run; yield the :class:`OutputFolder`.

    Write the new files into ``folder.staging``; when the body ends without an error they
    are moved into ``path`` (see the module docstring). On any error or interrupt ``path`` is
    left as it was, with no lock or staging folder behind; an OS error (disk full,
    read-only...) on the output becomes one :class:`InputError` line.
    """
    folder = OutputFolder(path, force, option, command, inputs, resume, need_bytes).reserve()
    try:
        yield folder
    except OSError as e:
        folder.abort()
        if _is_output_error(e, folder.path):
            raise os_input_error(e, "write in the output folder", e.filename or folder.path,
                                 option) from None
        raise
    except BaseException:
        folder.abort()
        raise
    folder.commit()


def _is_output_error(e: OSError, out: Path) -> bool:
    if e.errno in (errno.ENOSPC, errno.EDQUOT, errno.EROFS):
        return True
    name = e.filename
    return name is not None and _inside(Path(str(name)), out)


@contextmanager
def staged_dir(path: str | Path, force: bool = False, option: str = "--out",
               command: str = "lapbalance", inputs: Iterable = ()):
    """Yield a staging folder for ``path``; on success its files replace the earlier result.

    The short form of :func:`output_folder` (same rules): if the body raises (or the process
    is interrupted), ``path`` is left exactly as it was.
    """
    with output_folder(path, force, option, command, inputs) as folder:
        yield folder.staging


def check_output_dir(path: str | Path, force: bool, option: str = "--out",
                     inputs: Iterable = ()) -> Path:
    """Refuse a folder that is not ours to write (see :class:`OutputFolder`); no writes."""
    OutputFolder(path, force, option, inputs=inputs).check()
    return Path(path)


# --------------------------------------------------------------------------------------------
# single output files
# --------------------------------------------------------------------------------------------

#: Signatures of files lapbalance writes (for the message when one is in the way).
_SIGNATURES = (b'<meta name="generator" content="lapbalance', b"Software\x00lapbalance",
               b"balance_front_cg")


def written_by_lapbalance(path: str | Path) -> bool:
    """True if ``path`` looks like a file lapbalance wrote (report, map, corrected table)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(65536)
    except OSError:
        return False
    return any(s in head for s in _SIGNATURES)


def check_output_file(path: str | Path, force: bool, option: str = "--out",
                      inputs: Iterable = ()) -> Path:
    """Refuse to write ``path`` if it is a folder, an input of this run, or (without
    ``force``) an existing file; no writes are made."""
    path = Path(path)
    name = clip(str(path), 160)
    if path.is_dir():
        raise InputError(f"{name} is a folder; give a file name for {option}", option)
    for f in inputs:
        if f is not None and (_same_file(path, Path(f))):
            raise InputError(f"{name} is an input of this run; choose another file for "
                             f"{option}", option)
    if path.exists() or path.is_symlink():
        if not path.is_file():
            raise InputError(f"{name} exists and is not a plain file; choose another "
                             f"{option}", option)
        if not force:
            what = ("an earlier lapbalance output" if written_by_lapbalance(path)
                    else "not written by lapbalance")
            raise InputError(f"{name} already exists; pass --force to replace it or choose "
                             f"another {option} ({what}; --force replaces this one file)",
                             option)
    return path


@contextmanager
def output_file(path: str | Path, force: bool = False, option: str = "--out",
                command: str = "lapbalance", inputs: Iterable = (), need_bytes: int = 64_000):
    """Take single output file ``path`` for one run; yield it (write it atomically inside).

    Checks it (:func:`check_output_file`), creates its folder, locks it with
    ``.NAME.lapbalance-lock`` beside it and checks that ``need_bytes`` are free, at the start,
    so an unwritable place or a full disk fails before any work and a second run is refused
    at once. On error nothing is left behind.
    """
    path = Path(path)
    try:
        check_output_file(path, force, option, inputs)
    except OSError as e:  # e.g. a name too long to look up
        raise os_input_error(e, "use the output file", e.filename or path, option) from None
    made: list[Path] = []
    lock = path.with_name(f".{path.name}.lapbalance-lock")
    locked = False
    try:
        made = _make_parents(path.parent)
        _take_lock(lock, command, path, option)
        locked = True
        check_free_space(path.parent, need_bytes, option, path)
        yield path
    except OSError as e:
        if locked:
            lock.unlink(missing_ok=True)
            locked = False
        _remove_empty(made)
        if _is_output_error(e, path.parent) or e.filename in (None, str(path), str(lock)):
            raise os_input_error(e, "write", e.filename or path, option) from None
        raise
    except BaseException:
        if locked:
            lock.unlink(missing_ok=True)
            locked = False
        _remove_empty(made)
        raise
    finally:
        if locked:
            lock.unlink(missing_ok=True)
