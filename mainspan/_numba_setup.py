"""Where numba keeps its compiled-function cache, chosen before numba is imported.

mainspan's kernels use ``numba.njit(cache=True)``.  numba stores the cache
beside the source (``__pycache__``) when it can write there; in a
system-wide or desktop-GIS install it cannot, and it falls back to the
user's cache folder, which may not be writable either (a service account
with no home).  numba then refuses to compile at all ("cannot cache
function ... no locator available").  So, when the package folder is not
writable and the user has not set ``NUMBA_CACHE_DIR``:

1. use ``<user cache dir>/mainspan/numba`` (:mod:`platformdirs`), if it can be
   created and written;
2. else ``<temp dir>/mainspan-numba-<uid>`` (made with mode 0700 and used only
   if this user owns it);
3. else run uncached: caching is switched off when numba is first imported,
   so the kernels compile on each run (slower start, same results).

This module must be imported before numba (``mainspan/__init__.py`` does).
"""

from __future__ import annotations

import os
import stat
import tempfile

__all__ = ["choose_cache_dir", "CHOSEN"]

#: What was chosen: "in-tree", "user", "temp", "uncached" or "env" (NUMBA_CACHE_DIR was set).
CHOSEN = None


def _writable_dir(path) -> bool:
    try:
        os.makedirs(path, exist_ok=True)
    except OSError:
        return False
    if not (os.path.isdir(path) and os.access(path, os.W_OK | os.X_OK)):
        return False
    try:                                   # access() can lie (read-only mounts, ACLs)
        fd, probe = tempfile.mkstemp(dir=path, prefix=".probe-")
        os.close(fd)
        os.unlink(probe)
    except OSError:
        return False
    return True


def _own_private_dir(path) -> bool:
    """Create *path* 0700, or accept it only if this user owns it and nobody else may write."""
    try:
        os.mkdir(path, 0o700)
    except FileExistsError:
        pass
    except OSError:
        return False
    try:
        st = os.lstat(path)
    except OSError:
        return False
    if not stat.S_ISDIR(st.st_mode):
        return False
    if hasattr(os, "getuid") and (st.st_uid != os.getuid() or st.st_mode & 0o022):
        return False
    return _writable_dir(path)


def choose_cache_dir(package_dir=None, environ=None):
    """Pick the numba cache location; returns ``(kind, path or None)``.

    Parameters
    ----------
    package_dir : str, optional
        The installed ``mainspan`` folder (default: this file's folder).
    environ : dict, optional
        Environment to read and update (default :data:`os.environ`).
    """
    env = os.environ if environ is None else environ
    if env.get("NUMBA_CACHE_DIR"):
        return "env", env["NUMBA_CACHE_DIR"]
    package_dir = package_dir or os.path.dirname(os.path.abspath(__file__))
    pycache = os.path.join(package_dir, "__pycache__")
    if os.access(package_dir, os.W_OK | os.X_OK) and \
            (not os.path.exists(pycache) or os.access(pycache, os.W_OK | os.X_OK)):
        return "in-tree", None
    try:
        import platformdirs
        user = os.path.join(platformdirs.user_cache_dir("mainspan", appauthor=False), "numba")
    except Exception:   # platformdirs missing or no home: try the temp folder
        user = None
    if user and _writable_dir(user):
        env["NUMBA_CACHE_DIR"] = user
        return "user", user
    if hasattr(os, "getuid"):
        uid = str(os.getuid())
    else:
        import getpass
        uid = getpass.getuser()
    tmp = os.path.join(tempfile.gettempdir(), f"mainspan-numba-{uid}")
    if _own_private_dir(tmp):
        env["NUMBA_CACHE_DIR"] = tmp
        return "temp", tmp
    return "uncached", None


def _disable_numba_caching():
    """Make ``cache=True`` a no-op for this process (numba is imported here)."""
    from numba.core.dispatcher import Dispatcher

    Dispatcher.enable_caching = lambda self: None


def setup():
    """Choose once per process (see the module notes); returns :data:`CHOSEN`."""
    global CHOSEN
    if CHOSEN is not None:
        return CHOSEN
    try:
        kind, _ = choose_cache_dir()
    except Exception:       # never let cache housekeeping stop a run
        kind = "uncached"
    if kind == "uncached":
        try:
            _disable_numba_caching()
        except Exception:   # numba missing: the import error comes, clearer, from the caller
            pass
    CHOSEN = kind
    return kind
