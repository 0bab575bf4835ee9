"""numba's cache goes where this user can write, or caching is off; a run never fails on it."""

import os
import shutil
import stat
import subprocess
import sys
import sysconfig
import textwrap

import pytest

import mainspan._numba_setup as ns
from tests.safety_helpers import ROOT


@pytest.fixture
def readonly_package(tmp_path, monkeypatch):
    """A package folder that this user may not write (simulated: tests may run as root)."""
    pkg = tmp_path / "site" / "mainspan"
    pkg.mkdir(parents=True)
    real = os.access
    monkeypatch.setattr(ns.os, "access",
                        lambda p, m, **kw: False if str(p).startswith(str(pkg))
                        else real(p, m, **kw))
    return str(pkg)


def test_user_set_cache_dir_is_respected(tmp_path):
    env = {"NUMBA_CACHE_DIR": str(tmp_path)}
    assert ns.choose_cache_dir(environ=env) == ("env", str(tmp_path))


def test_writable_package_keeps_numbas_own_cache(tmp_path):
    env = {}
    assert ns.choose_cache_dir(package_dir=str(tmp_path), environ=env) == ("in-tree", None)
    assert "NUMBA_CACHE_DIR" not in env


def test_readonly_package_uses_the_user_cache_folder(tmp_path, readonly_package, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    env = {}
    kind, path = ns.choose_cache_dir(package_dir=readonly_package, environ=env)
    assert kind == "user" and env["NUMBA_CACHE_DIR"] == path
    assert path.startswith(str(tmp_path / "cache")) and os.path.isdir(path)


def test_no_home_falls_back_to_a_private_temp_folder(tmp_path, readonly_package, monkeypatch):
    blocker = tmp_path / "not_a_dir"
    blocker.write_text("x")
    monkeypatch.setenv("XDG_CACHE_HOME", str(blocker))           # cannot hold a folder
    monkeypatch.setattr(ns.tempfile, "gettempdir", lambda: str(tmp_path))
    env = {}
    kind, path = ns.choose_cache_dir(package_dir=readonly_package, environ=env)
    assert kind == "temp" and os.path.dirname(path) == str(tmp_path)
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o700


def test_shared_temp_folder_is_not_trusted(tmp_path, readonly_package, monkeypatch):
    blocker = tmp_path / "not_a_dir"
    blocker.write_text("x")
    monkeypatch.setenv("XDG_CACHE_HOME", str(blocker))
    monkeypatch.setattr(ns.tempfile, "gettempdir", lambda: str(tmp_path))
    planted = tmp_path / f"mainspan-numba-{os.getuid()}"
    planted.mkdir()
    os.chmod(planted, 0o777)                  # anyone could have planted code here
    env = {}
    assert ns.choose_cache_dir(package_dir=readonly_package, environ=env) == ("uncached", None)
    assert "NUMBA_CACHE_DIR" not in env


def _nobody_python():
    """An interpreter user 'nobody' can run, with the site-packages to put on its path."""
    if os.geteuid() != 0 or not shutil.which("runuser"):
        return None, None
    site = sysconfig.get_paths()["purelib"]
    ver = "%d.%d" % sys.version_info[:2]
    for cand, path in ((sys.executable, ""), (f"/usr/bin/python{ver}", site),
                       (f"/usr/local/bin/python{ver}", site)):
        ok = os.path.exists(cand) and subprocess.run(
            ["runuser", "-u", "nobody", "--", cand, "-c", "import sys"],
            capture_output=True).returncode == 0
        if ok:
            return cand, path
    return None, None


@pytest.fixture
def shared_tmp():
    """A temp folder outside pytest's private one, so that another user can reach it."""
    import tempfile
    d = tempfile.mkdtemp(prefix="mainspan-test-")
    os.chmod(d, 0o755)
    yield __import__("pathlib").Path(d)
    shutil.rmtree(d, ignore_errors=True)


def test_unprivileged_user_compiles_cached_kernels(shared_tmp):
    """As 'nobody', with no writable home, against root-owned code: compiles, never fails."""
    py, site = _nobody_python()
    if py is None:
        pytest.skip("needs root, runuser and a Python interpreter user 'nobody' may run")
    if subprocess.run(["runuser", "-u", "nobody", "--", "test", "-r",
                       os.path.join(ROOT, "mainspan", "__init__.py")]).returncode != 0:
        pytest.skip("user 'nobody' cannot read this checkout")
    tmp_path = shared_tmp
    code_dir = tmp_path / "rootcode"          # root-owned, not writable by nobody
    code_dir.mkdir()
    (code_dir / "kern.py").write_text(textwrap.dedent("""
        import numba

        @numba.njit(cache=True)
        def plus_one(x):
            return x + 1
    """))
    os.chmod(tmp_path, 0o755)
    os.chmod(code_dir, 0o755)
    work = tmp_path / "work"
    work.mkdir()
    os.chmod(work, 0o777)
    env = {"PATH": os.environ.get("PATH", "/usr/bin:/bin"), "HOME": "/nonexistent",
           "TMPDIR": str(work),
           "PYTHONPATH": os.pathsep.join(p for p in (ROOT, str(code_dir), site) if p)}
    script = ("import mainspan, mainspan._numba_setup as m, kern; "
              "print(m.CHOSEN, kern.plus_one(41))")
    r = subprocess.run(["runuser", "-u", "nobody", "--", "env", *(f"{k}={v}" for k, v in
                        env.items()), py, "-s", "-c", script], capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split() == ["temp", "42"], r.stdout
    assert "no locator" not in r.stderr
