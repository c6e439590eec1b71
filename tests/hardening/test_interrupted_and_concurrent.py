"""Nothing lost, nothing corrupt: atomic writes, a batch killed mid-run, two batches on one folder.

=====================================================  =======================================================
situation                                              behaviour
=====================================================  =======================================================
a write fails half-way (disk full, crash before the    the old file is intact, no temporary file is left
rename)                                                (critline.fileio: temporary file, fsync, rename)
an existing file and overwrite refused                 the file keeps its bytes; one-line error naming it
batch, calibrate, reports written normally             no temporary file left anywhere in the output
batch killed with SIGKILL while reading                every cache file parses; the re-run reads only the
                                                       photos without a cached result, gives every photo a
                                                       result and exit 0; the dead run's lock is no obstacle
a damaged cache file (cut short)                       ignored: that photo is read again and the file replaced
a second batch while one runs on the same output       exit 2 at once, one line: "output folder is in use by
folder                                                 another critline batch (pid N)"; the first finishes
                                                       with complete, parseable reports
lock file left by a dead process                       stale: the next batch takes the folder over
=====================================================  =======================================================
"""

from __future__ import annotations

import os
import signal
import subprocess
import time
from pathlib import Path

import pytest
from hardening_helpers import CLI, assert_clean_stderr, cli, strict_json, variant, write_image

from critline.batch.lock import LOCK_NAME, OutputInUse, OutputLock, holder
from critline.errors import UsageError
from critline.fileio import atomic_write_bytes, atomic_write_text

N_KILL = 6


def _temp_files(folder: Path) -> list[Path]:
    return [p for p in folder.rglob("*") if p.name.endswith(".tmp")]


def _dead_pid() -> int:
    """The id of a process that has ended (started and waited for here)."""
    p = subprocess.Popen(["true"])
    p.wait()
    return p.pid


# ------------------------------------------------------------------------ atomic writes


def test_failed_write_keeps_the_old_file_and_leaves_no_temporary(tmp_path, monkeypatch):
    target = tmp_path / "calibration.toml"
    target.write_text("old = 1\n")

    def disk_full(fd):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "fsync", disk_full)
    with pytest.raises(OSError):
        atomic_write_text(target, "new = 2\n" * 1000)
    assert target.read_text() == "old = 1\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["calibration.toml"]


def test_refused_overwrite_keeps_the_file(tmp_path):
    target = tmp_path / "report.json"
    target.write_bytes(b"{}")
    with pytest.raises(UsageError, match="report.json: already exists"):
        atomic_write_bytes(target, b"[1]", overwrite=False)
    assert target.read_bytes() == b"{}"
    assert _temp_files(tmp_path) == []


# ---------------------------------------------------------------------- the output lock


def test_lock_refuses_a_second_holder_and_names_the_pid(tmp_path):
    out = tmp_path / "out"
    with OutputLock(out) as lock:
        assert lock.held and (out / LOCK_NAME).read_text().split() == [str(os.getpid())]
        assert holder(out) == os.getpid()
        with pytest.raises(OutputInUse) as err:
            OutputLock(out).acquire()
        assert str(err.value) == f"{out}: output folder is in use by another critline batch (pid {os.getpid()})"
        assert err.value.exit_code == 2
    assert not (out / LOCK_NAME).exists() and holder(out) is None
    assert not out.exists()  # created for the lock only, nothing written: removed again
    OutputLock(out).acquire().release()  # free again


def test_stale_lock_of_a_dead_process_is_taken_over(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    dead = _dead_pid()
    (out / LOCK_NAME).write_text(f"{dead}\n")
    assert holder(out) is None
    with OutputLock(out):
        assert (out / LOCK_NAME).read_text().split() == [str(os.getpid())]
    assert out.is_dir()  # it existed before: kept


# --------------------------------------------------------------- killed batch, re-run


@pytest.fixture(scope="module")
def parcel(tmp_path_factory, quartz_view):
    """N_KILL distinct photos of one invented stone."""
    d = tmp_path_factory.mktemp("parcel")
    for k in range(N_KILL):
        write_image(d / "stone-A" / f"r{10 * k:03d}_none.jpg", variant(quartz_view[0], k))
    assert len({p.read_bytes() for p in (d / "stone-A").iterdir()}) == N_KILL  # one cache entry each
    return d


def _batch_process(folder: Path, out: Path) -> subprocess.Popen:
    return subprocess.Popen(CLI + ["batch", str(folder), "--out", str(out), "--json", "--workers", "1",
                                   "--no-overlays"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for(condition, proc: subprocess.Popen, timeout: float = 120.0) -> None:
    t0 = time.monotonic()
    while not condition():
        if proc.poll() is not None:
            raise AssertionError(f"batch ended early ({proc.returncode}): {proc.stderr.read()}")
        if time.monotonic() - t0 > timeout:
            proc.kill()
            proc.wait()
            raise AssertionError("batch did not get going in time")
        time.sleep(0.02)


def _cache_files(out: Path) -> list[Path]:
    cache = out / "cache"
    return sorted(p for p in cache.iterdir() if not p.name.startswith(".")) if cache.is_dir() else []


def test_killed_batch_reruns_from_the_cache(parcel, tmp_path):
    out = tmp_path / "out"
    proc = _batch_process(parcel, out)
    try:
        _wait_for(lambda: len(_cache_files(out)) >= 2, proc)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.communicate()
    assert proc.returncode == -signal.SIGKILL
    # the dead run's lock file may still be there, naming a process that is gone
    lock = out / LOCK_NAME
    if lock.exists():
        assert lock.read_text().split() == [str(proc.pid)] and holder(out) is None
    survivors = _cache_files(out)
    assert 2 <= len(survivors) < N_KILL, "killed too late to test anything"
    for f in survivors:  # nothing half-written: every result file parses and is complete
        rec = strict_json(f.read_text(encoding="utf-8"))
        assert rec["schema"] == "critline.batch-cache/1" and rec["reading"]["status"] == "ok"
    assert not (out / "report.json").exists()

    run = cli("batch", parcel, "--out", out, "--json", "--workers", "1", "--no-overlays")
    assert run.code == 0, run.err
    doc = run.json()
    assert doc["counts"] == {"photos": N_KILL, "read": N_KILL - len(survivors), "cached": len(survivors),
                             "rejected": 0}
    (stone,) = doc["stones"]
    assert [r["status"] for r in stone["readings"]] == ["ok"] * N_KILL
    assert sum(r["cached"] for r in stone["readings"]) == len(survivors)
    assert len(_cache_files(out)) == N_KILL
    assert not lock.exists()
    assert_clean_stderr(run.err)


def test_damaged_cache_file_is_read_again(parcel, tmp_path):
    out = tmp_path / "out"
    assert cli("batch", parcel, "--out", out, "--workers", "1", "--no-overlays", "--json").code == 0
    victim = _cache_files(out)[0]
    data = victim.read_bytes()
    victim.write_bytes(data[: len(data) // 2])  # as a crash of a non-atomic writer would leave it
    run = cli("batch", parcel, "--out", out, "--workers", "1", "--no-overlays", "--json", "--overwrite")
    assert run.code == 0, run.err
    assert run.json()["counts"]["read"] == 1 and run.json()["counts"]["cached"] == N_KILL - 1
    strict_json(victim.read_text(encoding="utf-8"))  # replaced by a complete result
    assert _temp_files(out) == []


def test_second_batch_on_the_same_folder_is_refused(parcel, tmp_path):
    out = tmp_path / "shared"
    first = _batch_process(parcel, out)
    stopped = False
    try:
        _wait_for(lambda: (out / LOCK_NAME).exists() and holder(out) == first.pid, first)
        # hold the first run still while the second tries: a deterministic overlap
        first.send_signal(signal.SIGSTOP)
        stopped = True
        second = subprocess.run(CLI + ["batch", str(parcel), "--out", str(out), "--json", "--workers", "1"],
                                capture_output=True, text=True, timeout=120)
        assert second.returncode == 2
        assert second.stdout == ""
        assert second.stderr.strip() == (f"critline: error: {out}: output folder is in use by another "
                                         f"critline batch (pid {first.pid})")
    finally:
        if stopped:
            first.send_signal(signal.SIGCONT)
        stdout, stderr = first.communicate(timeout=300)
    assert first.returncode == 0, stderr
    doc = strict_json(stdout)
    assert doc["counts"]["read"] == N_KILL and len(doc["stones"][0]["readings"]) == N_KILL
    report = strict_json((out / "report.json").read_text(encoding="utf-8"))
    assert report == doc
    assert not (out / "report-2.json").exists()
    assert not (out / LOCK_NAME).exists() and _temp_files(out) == []
    # and once the first is done, the folder is free again (everything now from the cache)
    again = cli("batch", parcel, "--out", out, "--json", "--workers", "1", "--no-overlays")
    assert again.code == 0 and again.json()["counts"]["cached"] == N_KILL
    assert (out / "report-2.json").exists()  # the earlier report kept, not overwritten
