"""Output safety shared by every mainspan writer.

What is promised (the README's "Reliability" section says the same):

* **Atomic replace.**  A file is written to a temporary file in the target's
  own folder (``.mainspan-<pid>-<token><ext>``), flushed and ``fsync``-ed,
  then moved over the target with :func:`os.replace`, and the folder is
  ``fsync``-ed.  A reader sees the old file or the new one, never half of one.
  The temporary file is removed on any error, on Ctrl-C and on SIGTERM (the
  command line turns SIGTERM into a clean exit); one left behind by a run that
  was killed outright (``kill -9``, power loss) is removed, with a note, by the
  next run writing into that folder.
* **Same file, same rights.**  A replaced file keeps its permission bits (and
  its owner and group where the operating system allows); a new file gets
  the usual ``0666 & ~umask``.  An output path that is a symbolic link is
  written through to the file it points at; the link stays.
* **Locking.**  Every read-copy-write of a target holds an advisory lock
  (:mod:`filelock`, an empty ``.mainspan.lock`` file in the target's folder,
  which stays there and may be deleted when no run is active).  A
  second writer waits, saying so on stderr, for at most
  :data:`LOCK_TIMEOUT_S` seconds (environment ``MAINSPAN_LOCK_TIMEOUT_S``),
  then gives up with a "busy" error; it never writes over the first run's
  result unnoticed.  The lock only guards against other mainspan runs.
* **Paths checked before any work.**  :func:`preflight` resolves every input
  and output (``realpath``, :func:`os.path.samefile`) and refuses an output
  that is an input, two outputs that are the same file, an output with the
  wrong extension for its option, and an output folder that is missing or
  not writable.
* **Project files.**  An output named in a project file must lie inside the
  project file's folder unless the command line allows otherwise
  (``--allow-outside-project``); ``overwrite = true`` in a project file only
  replaces files that mainspan itself wrote, recognised by content
  (:func:`written_by_mainspan`); anything else needs ``--overwrite`` on the
  command line.
"""

from __future__ import annotations

import contextlib
import os
import re
import secrets
import stat
import sys
import time
from dataclasses import dataclass

from .errors import DataFileError, InputError, OverwriteError

__all__ = ["OutputSpec", "preflight", "resolve_output", "atomic_write", "temp_beside",
           "output_lock", "written_by_mainspan", "clean_stale_temps", "fsync_path",
           "copy_file_rights", "EXTENSIONS", "LOCK_TIMEOUT_S", "LOCK_NAME", "TEMP_PREFIX",
           "HTML_MARKER"]

#: Prefix of every temporary file mainspan creates beside an output.
TEMP_PREFIX = ".mainspan-"
#: Seconds a second writer waits for the lock on a target before giving up.
LOCK_TIMEOUT_S = 60.0
#: The lock file, one per output folder.
LOCK_NAME = ".mainspan.lock"
#: The marker the HTML report carries in its ``<head>`` (see :func:`written_by_mainspan`).
HTML_MARKER = '<meta name="generator" content="mainspan">'

#: Accepted extensions of each kind of output (lower case, with the dot).
EXTENSIONS = {
    "gpkg": (".gpkg",),
    "report": (".html", ".htm"),
    "dxf": (".dxf",),
    "landxml": (".xml", ".landxml"),
    "links_csv": (".csv",),
    "quantities_csv": (".csv",),
    "figure": (".png", ".svg", ".pdf"),
}

_TEMP_RE = re.compile(r"^\.mainspan-(\d+)-[0-9a-f]{8}(\.[A-Za-z0-9]+)?(-journal|-wal|-shm)?$")
_LEGACY_TEMP_RE = re.compile(r"^\.mainspan-[A-Za-z0-9_]{8}\.(gpkg|tmp)$")
_LEGACY_AGE_S = 3600.0


def _say(msg):
    print(f"mainspan: {msg}", file=sys.stderr, flush=True)


# ----------------------------------------------------------------------------- paths
def resolve_output(path) -> str:
    """The file an output path really names: symbolic links followed, absolute."""
    return os.path.realpath(os.fspath(path))


def _same(a, b) -> bool:
    try:
        if os.path.exists(a) and os.path.exists(b):
            return os.path.samefile(a, b)
    except OSError:
        pass
    return os.path.normcase(os.path.realpath(a)) == os.path.normcase(os.path.realpath(b))


def _inside(path, folder) -> bool:
    p, f = os.path.realpath(path), os.path.realpath(folder)
    try:
        return os.path.commonpath([p, f]) == f
    except ValueError:      # different drives
        return False


@dataclass
class OutputSpec:
    """One output of a command, as :func:`preflight` checks it.

    Attributes
    ----------
    label : str
        How the user named it: ``"--out"``, ``"[output] report"``, ...
    path : str
        The path as given (already joined to the project folder for project keys).
    kind : str
        A key of :data:`EXTENSIONS`.
    from_project : bool
        The path came from a project file (containment and overwrite rules apply).
    layered : bool
        A GeoPackage that mainspan adds layers to (an existing file is not an error by itself).
    """

    label: str
    path: str
    kind: str
    from_project: bool = False
    layered: bool = False
    overwrite: bool = False     # set by preflight: may this run replace what is there?


def written_by_mainspan(path) -> bool:
    """Whether *path* is a file that mainspan wrote, judged by its content.

    A GeoPackage holding a ``run_info`` (or ``run_info_<scenario>``) table or
    the ``mainspan_layers`` manifest; an HTML file with :data:`HTML_MARKER` or
    the report's header line; a LandXML file whose ``Application`` is
    mainspan; a DXF whose header carries the ``mainspan`` custom property.
    CSV tables and figures carry no marker and are never recognised.
    """
    path = os.fspath(path)
    try:
        with open(path, "rb") as f:
            head = f.read(65536)
    except OSError:
        return False
    if head.startswith(b"SQLite format 3\x00"):
        import sqlite3
        try:
            con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
            try:
                names = {r[0] for r in con.execute(
                    "SELECT name FROM sqlite_master WHERE type='table'")}
            finally:
                con.close()
        except sqlite3.Error:
            return False
        return "mainspan_layers" in names or any(
            n == "run_info" or n.startswith("run_info_") for n in names)
    low = head.lower()
    if low.lstrip().startswith((b"<!doctype html", b"<html")):
        return HTML_MARKER.encode() in head or b'<p class="sub">mainspan ' in head
    if b"<landxml" in low:
        return b'<application name="mainspan"' in low
    if b"$customproperty" in low or b"section" in low[:200]:
        return re.search(rb"\$CUSTOMPROPERTYTAG\s*\n\s*1\s*\n\s*WRITER\s*\n\s*9\s*\n\s*"
                         rb"\$CUSTOMPROPERTY\s*\n\s*1\s*\n\s*mainspan", head) is not None
    return False


def _folder_writable(label, path):
    folder = os.path.dirname(resolve_output(path))
    if not os.path.isdir(folder):
        raise DataFileError(f"{label} {path!r}: folder {folder!r} does not exist; create it "
                            "first or choose another path")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise DataFileError(f"{label} {path!r}: folder {folder!r} is not writable by this user; "
                            "choose another folder or fix its permissions")


def preflight(outputs, inputs=(), *, cli_overwrite=False, project_overwrite=False,
              project_root=None, allow_outside=False):
    """Check every output against every input and each other before any work.

    Parameters
    ----------
    outputs : list of OutputSpec
        Their ``overwrite`` field is set to what this run may replace.
    inputs : iterable of (str, str)
        ``(label, path)`` of every file the run reads; missing ones are skipped
        (the reader reports them).
    cli_overwrite : bool
        ``--overwrite`` was given on the command line.
    project_overwrite : bool
        ``overwrite = true`` is written in the project file.
    project_root : str, optional
        The project file's folder.
    allow_outside : bool
        ``--allow-outside-project`` was given.

    Raises
    ------
    InputError, DataFileError, OverwriteError
        With a one-line message naming both files, the folder, or the option.
    """
    outputs = [o for o in outputs if o.path]
    inputs = [(lab, os.fspath(p)) for lab, p in inputs if p]
    for o in outputs:
        o.path = os.fspath(o.path)
        exts = EXTENSIONS[o.kind]
        if not o.path.lower().endswith(exts):
            raise InputError(f"{o.label} {o.path!r}: this output must end in "
                             f"{' or '.join(exts)}; choose a file name with that extension")
        if os.path.isdir(o.path):
            raise InputError(f"{o.label} {o.path!r} is a folder; give a file name")
    for i, o in enumerate(outputs):
        for lab, p in inputs:
            if _same(o.path, p):
                raise InputError(f"{o.label} {o.path!r} is the same file as the input {lab} "
                                 f"{p!r}; write the output elsewhere")
        for o2 in outputs[i + 1:]:
            if _same(o.path, o2.path):
                raise InputError(f"{o.label} {o.path!r} and {o2.label} {o2.path!r} are the "
                                 "same file; give each output its own path")
    for o in outputs:
        if o.from_project and project_root and not allow_outside \
                and not _inside(o.path, project_root):
            raise InputError(f"{o.label} {o.path!r} lies outside the project folder "
                             f"{project_root!r}; a project file may only write inside its own "
                             "folder: move the output there, or pass --allow-outside-project")
        _folder_writable(o.label, o.path)
        exists = os.path.exists(o.path)
        ours = exists and written_by_mainspan(o.path)
        o.overwrite = bool(cli_overwrite or (project_overwrite and ours))
        if exists and not o.overwrite and not o.layered:
            if project_overwrite:
                raise OverwriteError(f"{o.label} {o.path!r} exists and was not written by "
                                     "mainspan; 'overwrite = true' in a project file only "
                                     "replaces mainspan's own outputs: pass --overwrite on the "
                                     "command line to replace it, or choose another path")
            raise OverwriteError(f"{o.label} {o.path!r} already exists; pass --overwrite to "
                                 "replace it, or choose another path")
    return outputs


# ----------------------------------------------------------------------------- temp files
def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def clean_stale_temps(folder) -> list[str]:
    """Remove temporary files left in *folder* by mainspan runs that were killed.

    A temporary file names the process that made it; it is stale when that
    process no longer runs (same machine).  Returns the names removed; each
    removal is noted on stderr.
    """
    removed = []
    try:
        names = os.listdir(folder)
    except OSError:
        return removed
    now = time.time()
    for name in names:
        if not name.startswith(TEMP_PREFIX):
            continue
        full = os.path.join(folder, name)
        m = _TEMP_RE.match(name)
        stale = False
        if m:
            stale = not _pid_alive(int(m.group(1)))
        elif _LEGACY_TEMP_RE.match(name):
            try:
                stale = now - os.lstat(full).st_mtime > _LEGACY_AGE_S
            except OSError:
                stale = False
        if stale:
            try:
                os.unlink(full)
            except OSError:
                continue
            removed.append(name)
            _say(f"note: removed {full!r}, a temporary file left by an interrupted run")
    return removed


def _new_file_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def copy_file_rights(target, tmp):
    """Give *tmp* the mode (and owner and group, when permitted) of *target*.

    When *target* does not exist, *tmp* gets ``0666 & ~umask`` like any new file.
    """
    try:
        st = os.stat(target)
    except FileNotFoundError:
        os.chmod(tmp, _new_file_mode())
        return
    os.chmod(tmp, stat.S_IMODE(st.st_mode))
    if hasattr(os, "chown"):
        mine = os.stat(tmp)
        if (mine.st_uid, mine.st_gid) != (st.st_uid, st.st_gid):
            with contextlib.suppress(OSError):
                os.chown(tmp, st.st_uid, st.st_gid)
            with contextlib.suppress(OSError):      # the group alone may still be allowed
                os.chown(tmp, -1, st.st_gid)


def fsync_path(path):
    """``fsync`` a file or a folder by path (folders where the platform allows)."""
    flags = os.O_RDONLY | getattr(os, "O_DIRECTORY", 0) if os.path.isdir(path) else os.O_RDONLY
    try:
        fd = os.open(path, flags)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@contextlib.contextmanager
def temp_beside(target, suffix=None):
    """Yield a fresh temporary path in *target*'s folder; remove it unless it was moved.

    The file is not created (GDAL wants to create it); the name carries the
    process id so that a later run can tell a stale one from a live one.
    """
    folder = os.path.dirname(target)
    if suffix is None:
        suffix = os.path.splitext(target)[1] or ".tmp"
    tmp = os.path.join(folder, f"{TEMP_PREFIX}{os.getpid()}-{secrets.token_hex(4)}{suffix}")
    try:
        yield tmp
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        for extra in ("-journal", "-wal", "-shm"):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp + extra)


def replace_into(tmp, target):
    """fsync *tmp*, give it *target*'s rights, move it over *target*, fsync the folder."""
    fsync_path(tmp)
    copy_file_rights(target, tmp)
    os.replace(tmp, target)
    fsync_path(os.path.dirname(target))


# ----------------------------------------------------------------------------- locking
def _lock_timeout_s() -> float:
    raw = os.environ.get("MAINSPAN_LOCK_TIMEOUT_S")
    if raw:
        try:
            v = float(raw)
            if v >= 0:
                return v
        except ValueError:
            pass
    return LOCK_TIMEOUT_S


def lock_path_for(target) -> str:
    """The lock file guarding writes into *target*'s folder (one per folder)."""
    return os.path.join(os.path.dirname(target), LOCK_NAME)


_LOCKS: dict = {}


@contextlib.contextmanager
def output_lock(target, *, what="output", shown=None):
    """Hold the advisory lock of *target*'s folder (a resolved path) for a read-copy-write.

    One lock file per folder (:data:`LOCK_NAME`) serialises mainspan's writes
    there; the same process may take it again (re-entrant).  Waits up to
    ``MAINSPAN_LOCK_TIMEOUT_S`` seconds (default :data:`LOCK_TIMEOUT_S`),
    saying so once on stderr; then raises
    :class:`~mainspan.errors.DataFileError` ("busy").  Stale temporary files in
    the folder are cleaned once the lock is held.
    """
    import filelock

    shown = shown or target
    timeout = _lock_timeout_s()
    lpath = lock_path_for(target)
    lock = _LOCKS.get(lpath)
    if lock is None:
        lock = _LOCKS[lpath] = filelock.FileLock(lpath, mode=0o666)
    try:
        try:
            lock.acquire(timeout=0)
        except filelock.Timeout:
            _say(f"waiting for another mainspan run that is writing {shown!r} "
                 f"(at most {timeout:g} s) …")
            try:
                lock.acquire(timeout=timeout)
            except filelock.Timeout:
                raise DataFileError(
                    f"{what} {shown!r} is busy: another mainspan run has held it for more "
                    f"than {timeout:g} s; try again when that run has finished (or set "
                    "MAINSPAN_LOCK_TIMEOUT_S to wait longer)") from None
    except OSError as exc:
        if isinstance(exc, DataFileError):
            raise
        raise DataFileError(f"cannot lock {what} {shown!r}: {exc.strerror or exc}; check the "
                            "folder is writable") from None
    try:
        clean_stale_temps(os.path.dirname(target))
        yield
    finally:
        lock.release()


# ----------------------------------------------------------------------------- writing
def check_target(path, *, overwrite=False, what="output") -> str:
    """Validate an output path; refuse an existing file unless ``overwrite``.  Returns ``str``."""
    path = os.fspath(path)
    real = resolve_output(path)
    folder = os.path.dirname(real)
    if not os.path.isdir(folder):
        raise DataFileError(f"{what} {path!r}: folder {folder!r} does not exist; "
                            "create it first or choose another path")
    if os.path.isdir(real):
        raise DataFileError(f"{what} {path!r} is a folder; give a file name")
    if os.path.exists(real) and not overwrite:
        raise OverwriteError(f"{what} {path!r} already exists; pass --overwrite "
                             "(overwrite=True) to replace it")
    return path


def atomic_write(path, data, *, overwrite=False, what="output") -> str:
    """Write *data* (bytes, or str as UTF-8) to *path* safely.

    Lock, temporary file beside the target, fsync, the target's rights, atomic
    move, fsync of the folder (see the module notes).  A symbolic link at
    *path* is written through.  Returns *path* as given.
    """
    path = check_target(path, overwrite=overwrite, what=what)
    if isinstance(data, str):
        data = data.encode("utf-8")
    target = resolve_output(path)
    try:
        with output_lock(target, what=what, shown=path):
            check_target(path, overwrite=overwrite, what=what)   # again, under the lock
            with temp_beside(target) as tmp:
                fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
                with os.fdopen(fd, "wb") as f:
                    f.write(data)
                replace_into(tmp, target)
    except DataFileError:
        raise
    except OSError as exc:
        raise DataFileError(f"cannot write {what} {path!r}: {exc.strerror or exc}; check the "
                            "folder is writable and has space") from None
    return path


# ----------------------------------------------------------------------------- memory budget
#: Share of the machine's physical memory a run may plan to use when --memory-limit is not given.
DEFAULT_MEMORY_SHARE = 0.5
_MEMORY_LIMIT = None
_UNITS = {"": 1, "b": 1, "k": 2**10, "kb": 2**10, "kib": 2**10, "m": 2**20, "mb": 2**20,
          "mib": 2**20, "g": 2**30, "gb": 2**30, "gib": 2**30, "t": 2**40, "tb": 2**40,
          "tib": 2**40}


def physical_memory_bytes():
    """Installed memory in bytes, or None when the platform does not say."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return None


def parse_size(text, *, option="--memory-limit") -> int:
    """Bytes from a size such as ``4G``, ``512M``, ``1.5GiB`` (binary units)."""
    m = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([A-Za-z]*)\s*", str(text))
    unit = m.group(2).lower() if m else None
    if not m or unit not in _UNITS or unit in ("", "b"):
        raise InputError(f"option {option}: {text!r} is not a size; give a number with a unit, "
                         "e.g. 4G or 512M")
    v = float(m.group(1)) * _UNITS[unit]
    if not (v >= 2**20 and v < 2**60):
        raise InputError(f"option {option}: {text!r} is out of range; give at least 1M")
    return int(v)


def set_memory_limit(n_bytes):
    """Set (or with None reset to the default) the memory budget of this process's runs."""
    global _MEMORY_LIMIT
    _MEMORY_LIMIT = None if n_bytes is None else int(n_bytes)


def memory_limit_bytes() -> int:
    """The budget: ``--memory-limit``, else half the physical memory (4 GiB if unknown)."""
    if _MEMORY_LIMIT is not None:
        return _MEMORY_LIMIT
    ram = physical_memory_bytes()
    return int(ram * DEFAULT_MEMORY_SHARE) if ram else 4 * 2**30


def _human(n):
    for unit, f in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20)):
        if n >= f:
            return f"{n / f:.1f} {unit}"
    return f"{n / 2**10:.0f} KiB"


def check_memory(n_bytes, *, what, fix):
    """Refuse work whose estimate exceeds the budget, before allocating anything.

    Parameters
    ----------
    n_bytes : float
        The estimate.
    what : str
        What would need it, e.g. "sampling terrain raster 'dem.tif' every 1e-06 m".
    fix : str
        What the user can change.
    """
    limit = memory_limit_bytes()
    if not (n_bytes <= limit):
        raise InputError(f"{what} needs about {_human(n_bytes)} of memory, more than the limit "
                         f"of {_human(limit)} (--memory-limit; default half the installed "
                         f"memory); {fix}")
