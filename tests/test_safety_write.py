"""Atomic replace under signals and concurrent runs, with real processes; rights and links kept.

Small and fast on purpose: these run in CI on every push.
"""

import os
import signal
import stat
import subprocess
import sys
import time

import pytest

from tests.conftest import run_cli
from tests.safety_helpers import (ROOT, leftovers, make_sites, one_error_line, run_module,
                                  snapshot)


@pytest.fixture
def sites(tmp_path):
    return make_sites(tmp_path / "sites.gpkg", n=12)


def _env(**extra):
    e = dict(os.environ)
    e["PYTHONPATH"] = ROOT + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    e.update(extra)
    return e


# A child that runs the real CLI but stops just before the atomic move, with the temporary
# file fully written, and says where it is.
_SLOW_CHILD = r"""
import sys, time
import mainspan.safeio as s
real = s.replace_into
def slow(tmp, target):
    with open(sys.argv[1], "w") as f:
        f.write(tmp)
    time.sleep(120)
    real(tmp, target)
s.replace_into = slow
from mainspan.cli import main
sys.exit(main(sys.argv[2:]))
"""


def _start_slow(tmp_path, args):
    flag = tmp_path / "at_replace.txt"
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_CHILD, str(flag), *map(str, args)],
                            env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    t0 = time.monotonic()
    while not (flag.exists() and flag.read_text()):
        if proc.poll() is not None or time.monotonic() - t0 > 240:
            proc.kill()
            pytest.fail(f"child did not reach the write: {proc.communicate()}")
        time.sleep(0.05)
    return proc, flag.read_text()


@pytest.mark.parametrize("sig,code", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_signal_during_write_leaves_old_file_and_no_temp(tmp_path, sites, sig, code, capsys):
    out = tmp_path / "layout.gpkg"
    assert run_cli(["plan", "--sites", sites, "--out", out, "--quiet"], capsys)[0] == 0
    before = snapshot(out)
    proc, tmp = _start_slow(tmp_path, ["plan", "--sites", sites, "--out", out, "--quiet",
                                       "--overwrite", "--system", "pressure"])
    assert os.path.exists(tmp) and os.path.basename(tmp).startswith(".mainspan-")
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == code, err
    assert "Traceback" not in err
    assert snapshot(out) == before
    assert leftovers(tmp_path) == []


def test_killed_run_leaves_temp_that_next_run_cleans_with_a_note(tmp_path, sites, capsys):
    out = tmp_path / "report.html"
    lay = tmp_path / "layout.gpkg"
    assert run_cli(["plan", "--sites", sites, "--out", lay, "--quiet"], capsys)[0] == 0
    proc, tmp = _start_slow(tmp_path, ["report", lay, "--out", out])
    proc.kill()                                   # kill -9: no chance to clean up
    proc.communicate(timeout=60)
    assert leftovers(tmp_path) == [os.path.basename(tmp)]
    assert not out.exists()
    code, _, err = run_cli(["report", lay, "--out", out], capsys)
    assert code == 0, err
    assert "note: removed" in err and os.path.basename(tmp) in err
    assert leftovers(tmp_path) == [] and out.exists()


_HOLDER = r"""
import os, sys, time
from mainspan.safeio import output_lock
with output_lock(os.path.realpath(sys.argv[1])):
    print("locked", flush=True)
    time.sleep(120)
"""


def test_second_writer_waits_then_fails_busy(tmp_path, sites, capsys):
    out = tmp_path / "layout.gpkg"
    holder = subprocess.Popen([sys.executable, "-c", _HOLDER, str(out)], env=_env(),
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        r = run_module(["plan", "--sites", sites, "--out", out, "--quiet"],
                       env={"MAINSPAN_LOCK_TIMEOUT_S": "1"}, timeout=240)
    finally:
        holder.kill()
        holder.communicate()
    assert r.returncode == 2, r.stderr
    assert "waiting for another mainspan run" in r.stderr
    line = one_error_line(r.stderr)
    assert "busy" in line and "layout.gpkg" in line
    assert not out.exists() and leftovers(tmp_path) == []


def test_two_plans_into_one_file_never_lose_a_run_silently(tmp_path, sites):
    out = tmp_path / "layout.gpkg"
    other = make_sites(tmp_path / "other.gpkg", n=15, seed=8)
    env = _env()
    procs = [subprocess.Popen([sys.executable, "-m", "mainspan", "plan", "--sites", str(s),
                               "--out", str(out), "--quiet"], env=env, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True) for s in (sites, other)]
    results = [(p.wait(timeout=300), p.communicate()[1]) for p in procs]
    codes = sorted(c for c, _ in results)
    assert codes == [0, 2], results
    loser = next(e for c, e in results if c == 2)
    assert "already has layer" in one_error_line(loser)
    import pyogrio
    n_nodes = len(pyogrio.read_dataframe(out, layer="nodes"))
    n_links = len(pyogrio.read_dataframe(out, layer="links"))
    assert (n_nodes, n_links) in ((12, 11), (15, 14))       # one whole run, not a mix
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("mode", [0o600, 0o644, 0o664])
def test_replace_keeps_file_mode(tmp_path, sites, capsys, mode):
    out, rep = tmp_path / "layout.gpkg", tmp_path / "r.html"
    args = ["plan", "--sites", sites, "--out", out, "--report", rep, "--quiet"]
    assert run_cli(args, capsys)[0] == 0
    for p in (out, rep):
        os.chmod(p, mode)
    old = os.umask(0o077)      # a new file would get 0600: the old mode must win
    try:
        assert run_cli(args + ["--overwrite"], capsys)[0] == 0
    finally:
        os.umask(old)
    for p in (out, rep):
        assert stat.S_IMODE(os.stat(p).st_mode) == mode, p


def test_new_file_mode_follows_umask(tmp_path, sites, capsys):
    old = os.umask(0o027)
    try:
        out = tmp_path / "layout.gpkg"
        assert run_cli(["plan", "--sites", sites, "--out", out, "--quiet"], capsys)[0] == 0
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(out).st_mode) == 0o640


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0,
                    reason="changing a file's owner needs root")
def test_replace_keeps_owner_when_permitted(tmp_path, sites, capsys):
    out = tmp_path / "layout.gpkg"
    args = ["plan", "--sites", sites, "--out", out, "--quiet"]
    assert run_cli(args, capsys)[0] == 0
    os.chown(out, 65534, 65534)
    assert run_cli(args + ["--overwrite"], capsys)[0] == 0
    st = os.stat(out)
    assert (st.st_uid, st.st_gid) == (65534, 65534)


def test_symlinked_output_is_written_through(tmp_path, sites, capsys):
    real_dir = tmp_path / "store"
    real_dir.mkdir()
    target, link = real_dir / "layout.gpkg", tmp_path / "layout.gpkg"
    rep_target, rep_link = real_dir / "r.html", tmp_path / "r.html"
    args = ["plan", "--sites", sites, "--out", link, "--report", rep_link, "--quiet"]
    # the first run writes plain files; then they move behind links
    assert run_cli(args, capsys)[0] == 0
    os.replace(link, target)
    os.replace(rep_link, rep_target)
    os.symlink(target, link)
    os.symlink(rep_target, rep_link)
    before = snapshot(target, rep_target)
    assert run_cli(args + ["--overwrite", "--system", "pressure"], capsys)[0] == 0
    assert os.path.islink(link) and os.path.islink(rep_link)
    after = snapshot(target, rep_target)
    assert after[0][0] != before[0][0] and after[1][0] != before[1][0]
    import pyogrio
    assert "quantities" in set(pyogrio.list_layers(target)[:, 0])
    assert leftovers(real_dir) == [] and leftovers(tmp_path) == []


def test_stale_temps_of_dead_processes_only_are_cleaned(tmp_path):
    from mainspan.safeio import clean_stale_temps
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    mine = os.getpid()
    names = [f".mainspan-{dead.pid}-0123abcd.gpkg", f".mainspan-{dead.pid}-0123abcd.gpkg-journal",
             f".mainspan-{dead.pid}-89abcdef.html", f".mainspan-{mine}-0123abcd.gpkg",
             ".mainspan.lock", ".mainspan-notes.txt"]
    for n in names:
        (tmp_path / n).write_text("x")
    removed = clean_stale_temps(tmp_path)
    assert sorted(removed) == sorted(names[:3])
    assert leftovers(tmp_path) == sorted([names[3], names[5]])


def test_temp_file_and_folder_are_fsynced_before_and_after_the_move(tmp_path, sites, capsys,
                                                                    monkeypatch):
    lay = tmp_path / "layout.gpkg"
    assert run_cli(["plan", "--sites", sites, "--out", lay, "--quiet"], capsys)[0] == 0
    synced = []
    real = os.fsync

    def spy(fd):
        synced.append(os.readlink(f"/proc/self/fd/{fd}"))
        return real(fd)
    if not os.path.isdir("/proc/self/fd"):
        pytest.skip("needs /proc to name the synced files")
    monkeypatch.setattr("mainspan.safeio.os.fsync", spy)
    assert run_cli(["report", lay, "--out", tmp_path / "r.html"], capsys)[0] == 0
    assert any(os.path.basename(p).startswith(".mainspan-") for p in synced), synced
    assert str(tmp_path) in synced                          # the folder, after the move


def test_failed_write_leaves_no_temp_and_the_old_file(tmp_path, sites, capsys, monkeypatch):
    lay = tmp_path / "layout.gpkg"
    args = ["plan", "--sites", sites, "--out", lay, "--quiet"]
    assert run_cli(args, capsys)[0] == 0
    before = snapshot(lay)

    def broken(tmp, target):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr("mainspan.safeio.replace_into", broken)
    code, _, err = run_cli(args + ["--overwrite"], capsys)
    assert code == 2 and "No space left on device" in one_error_line(err)
    assert snapshot(lay) == before and leftovers(tmp_path) == []
