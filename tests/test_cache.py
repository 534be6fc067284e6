"""The disk cache of tabulated melting paths: where it lives, its upkeep, its faults.

Fault tests use tiny tables (three paths on a coarse grid with few integration steps,
built in a fraction of a second) through the same load-or-build route as the full tables.
"""

import dataclasses
import os
import pickle
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import numpy as np
import platformdirs
import pytest
from lidmelt.forward import _cache, _path_facts, _table, get_parameterization, melt_column
from lidmelt.cli import main

KATZ = get_parameterization("katz2003")
TINY_AXES = (_table._Axis(1300.0, 50.0, 3), _table._Axis(0.0, 1.0, 1),
             _table._Axis(0.0, 1.0, 1), _table._pressure_axis(21))
TINY_SHAPE = (3, 1, 1, 21, 3)
TINY_STEPS = 40  # Runge-Kutta steps of the tiny tables (the key records them)


@pytest.fixture
def folder(tmp_path, monkeypatch):
    """An empty private cache folder; the in-memory tables are forgotten around the test."""
    monkeypatch.setenv("LIDMELT_CACHE", str(tmp_path))
    _table.path_table.cache_clear()
    yield tmp_path
    _table.path_table.cache_clear()


def _tiny():
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(_table, "_RK_STEPS", TINY_STEPS)
        return _table._load_or_build(KATZ, "tiny", *TINY_AXES)


def _tiny_key(param=KATZ, axes=TINY_AXES, form=None, code=None):
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(_table, "_RK_STEPS", TINY_STEPS)
        if form is not None:
            patch.setattr(_table, "_FORMAT", form)
        if code is not None:
            patch.setattr(_table, "_code_digest", lambda module: code)
        return _table._table_key(param, axes)


def _tiny_file(folder) -> Path:
    (path,) = folder.glob("paths-katz2003-tiny-*.npz")
    return path


@pytest.fixture(scope="module")
def tiny_truth():
    """The tiny table built without any cache."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(_table, "_RK_STEPS", TINY_STEPS)
        return _table._build(KATZ, *TINY_AXES)


def _own_file(folder, label, digit, size, used):
    path = folder / f"paths-katz2003-{label}-{digit * 16}.npz"
    path.write_bytes(b"x" * size)
    os.utime(path, (used, used))
    return path


# --- where the cache lives -------------------------------------------------------------

def test_folder_defaults_to_the_platform_user_cache(monkeypatch):
    monkeypatch.delenv("LIDMELT_CACHE")
    assert _cache.cache_folder() == Path(platformdirs.user_cache_dir("lidmelt"))


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="XDG applies to Linux")
def test_platform_folder_follows_xdg_cache_home(monkeypatch, tmp_path):
    # XDG Base Directory Specification (freedesktop.org): user caches go to $XDG_CACHE_HOME
    monkeypatch.delenv("LIDMELT_CACHE")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert _cache.cache_folder() == tmp_path / "lidmelt"


def test_lidmelt_cache_overrides_and_empty_switches_off(monkeypatch, tmp_path):
    monkeypatch.setenv("LIDMELT_CACHE", str(tmp_path / "tables"))
    assert _cache.cache_folder() == tmp_path / "tables"
    monkeypatch.setenv("HOME", str(tmp_path))
    monkeypatch.setenv("LIDMELT_CACHE", "~/elsewhere")
    assert _cache.cache_folder() == tmp_path / "elsewhere"
    monkeypatch.setenv("LIDMELT_CACHE", "")
    assert _cache.cache_folder() is None


def test_no_cache_writes_nothing(monkeypatch, tmp_path, tiny_truth):
    monkeypatch.setenv("LIDMELT_CACHE", "")
    monkeypatch.chdir(tmp_path)
    table = _tiny()
    np.testing.assert_array_equal(table.state, tiny_truth.state)
    assert list(tmp_path.iterdir()) == []


def test_session_cache_is_private_to_the_test_run(table_cache):
    assert os.environ["LIDMELT_CACHE"] == str(table_cache)
    assert table_cache != Path(platformdirs.user_cache_dir("lidmelt"))


# --- the size cap and least-recently-used pruning --------------------------------------

def test_limit_default_and_setting(monkeypatch):
    monkeypatch.delenv("LIDMELT_CACHE_MAX_MB", raising=False)
    assert _cache.cache_limit() == 500_000_000
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "250")
    assert _cache.cache_limit() == 250_000_000
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "0.5")
    assert _cache.cache_limit() == 500_000


@pytest.mark.parametrize("text", ["lots", "-1", "nan", "inf", "1e400", "2GB"])
def test_bad_limit_is_named_and_the_default_applies(monkeypatch, text):
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", text)
    with pytest.warns(UserWarning, match=r"LIDMELT_CACHE_MAX_MB = .* is not a size in "
                      r"megabytes >= 0; using the default, 500"):
        assert _cache.cache_limit() == 500_000_000


def test_prune_deletes_least_recently_used_own_files_only(tmp_path):
    now = time.time()
    oldest = _own_file(tmp_path, "dry", "a", 400, now - 400)
    older = _own_file(tmp_path, "wet", "b", 400, now - 300)
    recent = _own_file(tmp_path, "dry", "c", 400, now - 200)
    newest = _own_file(tmp_path, "wet", "d", 400, now - 100)
    foreign = {
        "notes.txt": b"mine",
        "paths-katz2003-dry-0123.npz": b"short digest: not our pattern",
        "paths-katz2003-dry-aaaaaaaaaaaaaaaa.npz.bak": b"a user's copy",
        "PATHS-katz2003-dry-aaaaaaaaaaaaaaaa.npz": b"other case",
        "paths-katz2003-dry-AAAAAAAAAAAAAAAA.npz": b"upper-case digest",
    }
    for name, data in foreign.items():
        (tmp_path / name).write_bytes(data)
        os.utime(tmp_path / name, (now - 10_000, now - 10_000))
    (tmp_path / "paths-katz2003-dry-eeeeeeeeeeeeeeee.npz").mkdir()  # a folder, not a file
    target = tmp_path / "precious.dat"
    target.write_bytes(b"y" * 5000)
    (tmp_path / "paths-katz2003-dry-ffffffffffffffff.npz").symlink_to(target)

    removed = _cache.prune(tmp_path, keep=oldest, limit=900)
    # 1600 bytes of tables, limit 900: the two least recently used go, but never `keep`
    assert sorted(removed) == sorted([older, recent])
    assert oldest.exists() and newest.exists()
    for name, data in foreign.items():
        assert (tmp_path / name).read_bytes() == data
    assert (tmp_path / "paths-katz2003-dry-eeeeeeeeeeeeeeee.npz").is_dir()
    assert target.read_bytes() == b"y" * 5000
    assert (tmp_path / "paths-katz2003-dry-ffffffffffffffff.npz").is_symlink()


def test_prune_within_the_limit_deletes_nothing_but_stale_partial_writes(tmp_path):
    now = time.time()
    table = _own_file(tmp_path, "dry", "a", 100, now - 5000)
    stale = tmp_path / ".paths-katz2003-dry-aaaaaaaaaaaaaaaa.npz.k2j_9x8a.tmp.npz"
    fresh = tmp_path / ".paths-katz2003-wet-bbbbbbbbbbbbbbbb.npz.q8r4zz1b.tmp.npz"
    stale_lock = tmp_path / ".paths-katz2003-wet-cccccccccccccccc.npz.lock"  # killed build
    foreign = tmp_path / ".results.csv.k2j_9x8a.tmp.csv"  # another writer's, not a table's
    foreign_lock = tmp_path / ".results.csv.lock"
    for path, age in ((stale, 7200), (fresh, 60), (stale_lock, 7200), (foreign, 7200),
                      (foreign_lock, 7200)):
        path.write_bytes(b"half a table")
        os.utime(path, (now - age, now - age))
    removed = _cache.prune(tmp_path, keep=table, limit=10**6)
    assert sorted(removed) == sorted([stale, stale_lock])
    assert table.exists() and fresh.exists()  # a write in progress is left to finish
    assert foreign.exists() and foreign_lock.exists()


def test_writing_a_table_prunes_to_the_limit(folder, monkeypatch):
    now = time.time()
    old = _own_file(folder, "dry", "a", 3000, now - 100)
    other = folder / "results.csv"
    other.write_bytes(b"z" * 10**6)  # large, but not ours: never counted or deleted
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "0.001")  # 1000 bytes
    _tiny()
    assert not old.exists()
    assert _tiny_file(folder).exists() and other.read_bytes() == b"z" * 10**6


def test_loading_marks_a_table_used(folder):
    _tiny()
    path = _tiny_file(folder)
    os.utime(path, (1_000_000_000, 1_000_000_000))
    _tiny()
    assert path.stat().st_mtime > time.time() - 60


# --- faults in the cache are rebuilt ----------------------------------------------------

def _stored(path):
    with np.load(path) as stored:
        return {name: stored[name] for name in stored.files}


def _write_npz(path, **arrays):
    with open(path, "wb") as handle:
        np.savez(handle, **arrays)


def _damage(case, path, truth):
    good = _stored(path)
    if case == "empty":
        path.write_bytes(b"")
    elif case == "npy under the name":
        with open(path, "wb") as handle:
            np.save(handle, truth.state)
    elif case == "pickle":
        path.write_bytes(pickle.dumps({"state": truth.state}))
    elif case == "text":
        path.write_text("not a table\n")
    elif case == "truncated":
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 2])
    elif case == "flipped bytes":
        data = bytearray(path.read_bytes())
        middle = len(data) // 2
        data[middle : middle + 64] = bytes(64)
        path.write_bytes(bytes(data))
    elif case == "wrong shape":
        _write_npz(path, **(good | {"state": truth.state[:2]}))
    elif case == "wrong dtype":
        _write_npz(path, **(good | {"state": truth.state.astype(np.float64)}))
    elif case == "big-endian":
        _write_npz(path, **(good | {"state": truth.state.astype(">f4")}))
    elif case == "NaN in state":
        state = truth.state.copy()
        state[1, 0, 0, 7, 0] = np.nan
        _write_npz(path, **(good | {"state": state}))
    elif case == "NaN in onset":
        onset = truth.onset.copy()
        onset[0] = np.nan
        _write_npz(path, **(good | {"onset": onset}))
    elif case == "onset out of range":
        _write_npz(path, **(good | {"onset": truth.onset + 50.0}))
    elif case == "no key (older format)":
        _write_npz(path, state=truth.state, onset=truth.onset)
    elif case == "no path facts":
        _write_npz(path, key=good["key"], state=truth.state, onset=truth.onset)
    elif case == "NaN in a path fact":
        _write_npz(path, **(good | {"facts_turn": np.full_like(good["facts_turn"], np.nan)}))
    elif case == "path fact of the wrong length":
        _write_npz(path, **(good | {"facts_margin": good["facts_margin"][:-1]}))
    elif case == "other code":
        _write_npz(path, **(good | {"key": np.array(_tiny_key(code="0" * 16))}))
    elif case == "extra array":
        _write_npz(path, **good, spare=np.zeros(3))
    elif case == "other format":
        _write_npz(path, **(good | {"key": np.array(_tiny_key(form=_table._FORMAT - 1))}))
    elif case == "other constants":
        other = dataclasses.replace(KATZ, thermo=dataclasses.replace(KATZ.thermo,
                                                                     heat_capacity=1100.0))
        _write_npz(path, **(good | {"key": np.array(_tiny_key(param=other))}))
    elif case == "key of other axes":
        axes = (TINY_AXES[0], TINY_AXES[1], TINY_AXES[2], _table._pressure_axis(22))
        _write_npz(path, **(good | {"key": np.array(_tiny_key(axes=axes))}))
    elif case == "key as bytes":
        _write_npz(path, **(good | {"key": np.array(good["key"].item().encode())}))
    elif case == "huge array header":
        with zipfile.ZipFile(path, "w") as archive:  # claims 10^12 floats it does not hold
            for name in (n for n in good if n != "state"):
                with archive.open(f"{name}.npy", "w") as member:
                    np.save(member, good[name])
            header = b"\x93NUMPY\x01\x00v\x00{'descr': '<f4', 'fortran_order': False, "
            header += b"'shape': (1000000000000,), }"
            header = header.ljust(127, b" ") + b"\n"
            archive.writestr("state.npy", header + bytes(64))
    else:
        raise AssertionError(case)


FAULTS = ["empty", "npy under the name", "pickle", "text", "truncated", "flipped bytes",
          "wrong shape", "wrong dtype", "big-endian", "NaN in state", "NaN in onset",
          "onset out of range", "no key (older format)", "no path facts", "NaN in a path fact",
          "path fact of the wrong length", "extra array", "other format", "other code",
          "other constants", "key of other axes", "key as bytes", "huge array header"]


@pytest.mark.parametrize("case", FAULTS)
def test_damaged_cache_file_is_rebuilt(folder, tiny_truth, case):
    _tiny()
    path = _tiny_file(folder)
    _damage(case, path, tiny_truth)
    key = _tiny_key()
    assert _table._read_cache(path, key, TINY_AXES) is None, "damage must be detected"
    table = _tiny()
    assert table.state.dtype == np.float32 and table.state.shape == TINY_SHAPE
    np.testing.assert_array_equal(table.state, tiny_truth.state)
    np.testing.assert_array_equal(table.onset, tiny_truth.onset)
    stored = _table._read_cache(path, key, TINY_AXES)  # replaced by a whole, valid table
    assert stored is not None
    np.testing.assert_array_equal(stored[0], tiny_truth.state)
    assert sorted(p.name for p in folder.iterdir()) == [path.name]  # no temporary files


def test_valid_cache_file_is_used_not_rebuilt(folder, monkeypatch, tiny_truth):
    _tiny()
    monkeypatch.setattr(_table, "_build", lambda *a, **k: pytest.fail("rebuilt a valid table"))
    monkeypatch.setattr(_path_facts, "_compute", lambda *a: pytest.fail("recomputed facts"))
    table = _tiny()
    np.testing.assert_array_equal(table.state, tiny_truth.state)
    monkeypatch.undo()
    fresh = _path_facts._compute(KATZ, tiny_truth)  # the stored facts are the computed ones
    stored = _path_facts.path_facts(KATZ, table)
    for field in dataclasses.fields(fresh):
        np.testing.assert_array_equal(getattr(stored, field.name), getattr(fresh, field.name))


def test_full_table_round_trip_and_damage(folder, monkeypatch):
    # end to end through melt_column, with McKenzie & Bickle's dry table (quick to build)
    expected = melt_column(1450.0, 30.0, parameterization="mckenzie-bickle1988")
    (path,) = folder.glob("paths-mckenzie-bickle1988-dry-*.npz")
    size = path.stat().st_size
    path.write_bytes(b"")
    _table.path_table.cache_clear()
    again = melt_column(1450.0, 30.0, parameterization="mckenzie-bickle1988")
    assert float(again.melt_thickness) == float(expected.melt_thickness)
    assert path.stat().st_size == size
    _table.path_table.cache_clear()
    monkeypatch.setattr(_table, "_build", lambda *a, **k: pytest.fail("rebuilt a valid table"))
    loaded = melt_column(1450.0, 30.0, parameterization="mckenzie-bickle1988")
    assert float(loaded.melt_thickness) == float(expected.melt_thickness)


def test_failed_write_leaves_no_temporary_file(folder, monkeypatch, tiny_truth):
    def half_then_full_disk(path, **arrays):
        Path(path).write_bytes(b"PK\x03\x04 half a table")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(_table.np, "savez", half_then_full_disk)
    table = _tiny()  # the model still runs
    np.testing.assert_array_equal(table.state, tiny_truth.state)
    assert list(folder.iterdir()) == []


def test_interrupted_write_leaves_no_temporary_file(folder, monkeypatch):
    def interrupted(path, **arrays):
        Path(path).write_bytes(b"PK\x03\x04 half a table")
        raise KeyboardInterrupt

    monkeypatch.setattr(_table.np, "savez", interrupted)
    with pytest.raises(KeyboardInterrupt):
        _tiny()
    assert list(folder.iterdir()) == []


# --- one table covers every water content -----------------------------------------------

def test_many_water_contents_build_no_new_tables(table_cache, monkeypatch):
    _table.path_table.cache_clear()
    melt_column(1400.0, 20.0, water=50.0)  # loads (or once builds) the table across water
    # Katz tables only: parallel workers share the folder and may add another
    # parameterization's table meanwhile (the patched _build guards this process anyway)
    def katz_tables():
        return {p.name: p.stat().st_size for p in table_cache.glob("paths-katz2003-*.npz")}

    before = katz_tables()
    monkeypatch.setattr(_table, "_build", lambda *a, **k: pytest.fail("built another table"))
    for water in np.linspace(1.0, 1000.0, 23):  # separate runs: nothing kept in memory
        _table.path_table.cache_clear()
        melt_column(1400.0, 20.0, water=water)
        melt_column([1300.0, 1500.0], 60.0, water=[water, 0.3 * water])
    assert katz_tables() == before


# --- lidmelt cache ------------------------------------------------------------------------

def test_cache_command_lists_and_clears_own_files_only(folder, capsys):
    now = time.time()
    dry = _own_file(folder, "dry", "a", 2_500_000, now - 3600)
    wet = _own_file(folder, "wet", "b", 90_000_000, now)
    notes = folder / "notes.txt"
    notes.write_text("keep me")
    assert main(["cache"]) == 0
    out = capsys.readouterr().out
    assert f"table cache: {folder} (from LIDMELT_CACHE)" in out
    assert "size: 92.5 MB in 2 tables; limit 500.0 MB" in out
    lines = out.splitlines()
    row_dry = next(line for line in lines if dry.name in line)
    row_wet = next(line for line in lines if wet.name in line)
    assert "2.5 MB" in row_dry
    assert time.strftime("%Y-%m-%d %H:%M", time.localtime(now - 3600)) in row_dry
    assert "90.0 MB" in row_wet
    assert lines.index(row_dry) < lines.index(row_wet)  # least recently used first
    assert "1 other entry here is not lidmelt's: left alone" in out
    assert "notes.txt" not in out

    assert main(["cache", "--clear"]) == 0
    out = capsys.readouterr().out
    assert "removed 2 files (92.5 MB)" in out
    assert not dry.exists() and not wet.exists() and notes.read_text() == "keep me"


def test_cache_command_when_off_or_empty(monkeypatch, tmp_path, capsys):
    monkeypatch.setenv("LIDMELT_CACHE", "")
    assert main(["cache"]) == 0
    assert "table cache: off" in capsys.readouterr().out
    assert main(["cache", "--clear"]) == 0
    monkeypatch.setenv("LIDMELT_CACHE", str(tmp_path / "not yet"))
    assert main(["cache"]) == 0
    assert "size: 0.0 MB in 0 tables" in capsys.readouterr().out
    assert not (tmp_path / "not yet").exists()  # listing creates nothing
    monkeypatch.setenv("LIDMELT_CACHE_MAX_MB", "lots")
    assert main(["cache"]) == 0
    err = capsys.readouterr().err
    assert err == ("lidmelt cache: warning: LIDMELT_CACHE_MAX_MB = 'lots' is not a size in "
                   "megabytes >= 0; using the default, 500\n")


def test_cli_subprocess_sees_the_session_cache(table_cache):
    run = subprocess.run([sys.executable, "-m", "lidmelt.cli", "cache"],
                         capture_output=True, text=True, env=dict(os.environ), check=True)
    assert f"table cache: {table_cache} (from LIDMELT_CACHE)" in run.stdout


_BUILD_ONCE = """
import sys, time
from lidmelt.forward import _table
sys.path.insert(0, {tests!r})
import test_cache

slow_build = _table._build
def build(*args, **kwargs):
    print("built", flush=True)
    time.sleep(3.0)  # long enough for the other process to arrive meanwhile
    return slow_build(*args, **kwargs)

_table._build = build
test_cache._tiny()
"""


def test_processes_needing_the_same_table_build_it_once(folder, tiny_truth):
    script = _BUILD_ONCE.format(tests=str(Path(__file__).parent))
    runs = [subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE,
                             text=True, env=dict(os.environ)) for _ in range(2)]
    outputs = [run.communicate(timeout=300)[0] for run in runs]
    assert [run.returncode for run in runs] == [0, 0]
    assert sum(out.count("built") for out in outputs) == 1
    assert sorted(p.name for p in folder.iterdir()) == [_tiny_file(folder).name]  # no lock
    np.testing.assert_array_equal(_tiny().state, tiny_truth.state)


def test_waiting_for_another_builder_is_said(tmp_path):
    # Another holder of the build lock (flock locks conflict between open files, even in
    # one process: Linux flock(2)) makes `building` report "waiting" until it lets go.
    import fcntl
    import threading

    from lidmelt.forward import progress

    path = tmp_path / "paths-x-0123456789abcdef.npz"
    lock = tmp_path / f".{path.name}.lock"
    holder = open(lock, "a+b")
    fcntl.flock(holder, fcntl.LOCK_EX)
    release = threading.Timer(0.8, lambda: (fcntl.flock(holder, fcntl.LOCK_UN),
                                            holder.close()))
    release.start()
    events = []
    clock = progress.BuildClock("x-wet", path, interval=0.0)
    with progress.listening(events.append), _cache.building(path, waiting=clock):
        entered = time.monotonic()
    release.join()
    assert events and {e.stage for e in events} == {"waiting"}
    assert events[-1].elapsed >= 0.5 and events[-1].remaining is None
    assert entered  # the block ran once the other holder let go


def test_progress_goes_to_the_innermost_listener_only():
    from lidmelt.forward import progress

    outer, inner = [], []
    event = progress.TableProgress("katz2003-wet", "building", 0.25, 30.0)
    with progress.listening(outer.append):
        with progress.listening(inner.append):
            progress.report(event)
        progress.report(event)
    assert inner == [event] and outer == [event]
    assert event.remaining == pytest.approx(90.0)  # 30 s for a quarter: 90 s to go
