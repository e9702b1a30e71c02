"""Crash safety: an append killed at any moment leaves a whole store, and a rerun completes it.

A big batch (thousands of small files) is appended in a child process that is
killed with SIGKILL: by its own progress callback at chosen stages, by a timer
that fires around COMMIT, or by this process after a random delay. Afterwards
the store must open, ``trendledger check`` must pass, the interrupted batch must
be wholly present or wholly absent, and appending again must land every row once.
The publish that follows every commit (copy the writer's copy, flush it, rename
it over the store's path) is killed at each of its steps too: the published
file must open as it was or as it became, never half, and the next command
must finish the publish. A full disk and a read-only folder must give one
clear error and change nothing.
"""

from __future__ import annotations

import errno
import os
import random
import shutil
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import duckdb
import pytest

from trendledger import Ledger
from trendledger.store.publish import Layout

from .audit import TRENDLEDGER, attack_rounds, audit, cli, one_clean_line, tally
from .conftest import Lab

#: Files in the batch that gets killed, two rows each: enough for a second or more of work.
BIG = 2000
BIG_DAY = "2026-04-01"
BASE_ROWS = 5 * 3

KILLER = textwrap.dedent(
    """
    import os, signal, sys, threading
    from trendledger import Ledger

    store, stage, at, delay = sys.argv[1], sys.argv[2], int(sys.argv[3]), float(sys.argv[4])

    def die():
        os.kill(os.getpid(), signal.SIGKILL)

    def progress(now, done, total):
        # at < 0 means "when this stage is complete"
        if now == stage and done >= (total if at < 0 else at):
            if delay:
                threading.Timer(delay, die).start()  # lands a little later: lineage, COMMIT
            else:
                die()

    led = Ledger.open(store)
    led.append(progress=progress)
    if stage == "committed":  # COMMIT returned; the WAL is not yet folded into the file
        die()
    if stage == "closing":  # killed while close() checkpoints the WAL into the file
        threading.Timer(delay, die).start()
    led.close()
    if delay:
        threading.Event().wait(60)  # the timer may fire after the work is done: wait for it
    print("finished", flush=True)
    """
)


def _big_paths() -> list[str]:
    return [f"incoming/{BIG_DAY}/c{i:04d}.csv" for i in range(BIG)]


@pytest.fixture(scope="module")
def crash_lab(tmp_path_factory: pytest.TempPathFactory) -> tuple[Lab, dict[str, bytes]]:
    """A lab with one small day loaded and one big day waiting; the clean store's files."""
    lab = Lab(tmp_path_factory.mktemp("crash") / "lab")
    lab.day("2026-03-02", {f"c{i:04d}": [(1, 3.0), (2, 2.99), (3, 2.98)] for i in range(5)})
    with lab.init() as led:
        assert led.append().rows == BASE_ROWS
    for i in range(BIG):
        lab.write(f"incoming/{BIG_DAY}/c{i:04d}.csv",
                  f"cycle,capacity_ah\n10,{2.9 + i * 1e-6!r}\n11,{2.89 + i * 1e-6!r}\n")
    layout = Layout.of(lab.store)
    assert not layout.wal.exists() and not layout.writer_wal.exists()
    return lab, {"": lab.store.read_bytes(), ".writer": layout.writer.read_bytes()}


def _fresh_store(crash_lab: tuple[Lab, dict[str, bytes]], tmp_path: Path) -> Path:
    """A copy of the clean store (same spec folder, so it sees the same files)."""
    _, clean = crash_lab
    store = tmp_path / "copy.duckdb"
    for leftover in Layout.of(store).files():  # a killed run's logs, lock and half copies
        leftover.unlink(missing_ok=True)
    for suffix, data in clean.items():
        store.with_name(store.name + suffix).write_bytes(data)
    return store


def _published_as_is(store: Path, more: int = 0) -> bool:
    """Open the published file as any DuckDB client would, before trendledger touches it:
    it must open, and hold the killed batch wholly (True) or not at all (False)."""
    con = duckdb.connect(str(store), read_only=True)
    try:
        files, rows = con.execute(
            "SELECT count(*), coalesce(sum(rows), 0) FROM ingest_files "
            "WHERE status = 'loaded' AND path LIKE $day",
            {"day": f"incoming/{BIG_DAY}/%"}).fetchall()[0]
        (stored,) = con.execute("SELECT count(*) FROM measurements").fetchall()[0]
    finally:
        con.close()
    assert (files, rows) in {(0, 0), (BIG, 2 * BIG)}, (files, rows)
    assert stored == BASE_ROWS + rows + more  # ``more``: rows of later batches
    return files == BIG


def _assert_whole_then_complete(store: Path, lab: Lab, expect_present: bool | None) -> None:
    """The batch is all-or-nothing, check passes, and a rerun lands exactly the rest."""
    result = cli("check", "--store", str(store))
    assert result.returncode == 0, result.stdout + result.stderr
    state = audit(store)
    assert state.problems == []
    whole = state.batch_is_whole(_big_paths(), 2)
    assert whole is not None, "the killed batch is partly in the store"
    if expect_present is not None:
        assert whole is expect_present
    assert state.rows == BASE_ROWS + (2 * BIG if whole else 0)

    with Ledger.open(store) as led:
        again = led.append()
    assert (again.files, again.rows) == ((0, 0) if whole else (BIG, 2 * BIG))
    state = audit(store)
    assert state.problems == []
    assert state.batch_is_whole(_big_paths(), 2) is True
    assert state.rows == BASE_ROWS + 2 * BIG
    assert len(state.loaded) == 5 + BIG


# (stage the callback watches, count it fires at (-1: stage complete), timer delay, outcome)
KILL_POINTS = {
    "hashing-first-file": ("hash", 1, 0.0, False),
    "hashing-halfway": ("hash", BIG // 2, 0.0, False),
    "hashing-done": ("hash", -1, 0.0, False),
    "in-transaction-before-insert": ("read", 0, 0.0, False),
    "rows-inserted-before-lineage": ("read", -1, 0.0, False),
    "lineage-or-commit-after-2ms": ("read", -1, 0.002, None),
    "lineage-or-commit-after-20ms": ("read", -1, 0.02, None),
    "lineage-or-commit-after-100ms": ("read", -1, 0.1, None),
    "commit-returned": ("committed", 0, 0.0, True),
    "checkpoint-on-close": ("closing", 0, 0.001, True),
}

# The publish after the commit, at each step: (stage, count, published file shows the batch)
PUBLISH_POINTS = {
    "copy-begun": ("copy", 0, False),           # the temporary copy exists, nothing in it
    "copy-first-mib": ("copy", 1, False),       # part of the file copied (or all of a small one)
    "copied-not-flushed": ("publish", 1, False),
    "flushed-not-renamed": ("publish", 2, False),
    "renamed-not-recorded": ("publish", 3, True),  # the lock file still says "publish due"
    "recorded": ("publish", 4, True),
}


@pytest.mark.slow
@pytest.mark.parametrize("point", list(KILL_POINTS))
def test_kill_at_a_chosen_point(crash_lab: tuple[Lab, dict[str, bytes]], tmp_path: Path,
                                point: str) -> None:
    lab, _ = crash_lab
    store = _fresh_store(crash_lab, tmp_path)
    stage, at, delay, present = KILL_POINTS[point]
    proc = subprocess.run([sys.executable, "-c", KILLER, str(store), stage, str(at), str(delay)],
                          capture_output=True, text=True, cwd=lab.root, timeout=300)
    assert proc.returncode == -9, proc.stderr  # it really died by SIGKILL
    assert "finished" not in proc.stdout
    tally("kills survived")
    _assert_whole_then_complete(store, lab, present)


@pytest.mark.slow
@pytest.mark.slow
@pytest.mark.parametrize("point", list(PUBLISH_POINTS))
def test_kill_while_publishing(crash_lab: tuple[Lab, dict[str, bytes]], tmp_path: Path,
                               point: str) -> None:
    lab, _ = crash_lab
    store = _fresh_store(crash_lab, tmp_path)
    stage, at, published = PUBLISH_POINTS[point]
    proc = subprocess.run([sys.executable, "-c", KILLER, str(store), stage, str(at), "0"],
                          capture_output=True, text=True, cwd=lab.root, timeout=300)
    assert proc.returncode == -9, proc.stderr
    tally("kills survived")
    # the path holds a whole store, old or new, and no log that DuckDB would replay into it
    assert not Layout.of(store).wal.exists()
    assert _published_as_is(store) is published
    # the batch was committed in the writer's copy: the next command (here a reader,
    # check) publishes it, and the copies agree
    result = cli("check", "--store", str(store))
    assert result.returncode == 0, result.stdout + result.stderr
    assert "published copy and writer's copy agree" in result.stdout
    assert _published_as_is(store) is True
    assert not Layout.of(store).staging.exists()
    _assert_whole_then_complete(store, lab, True)


@pytest.mark.slow
def test_killed_publish_is_finished_by_the_next_writer(
        crash_lab: tuple[Lab, dict[str, bytes]], tmp_path: Path) -> None:
    """No reader comes by: the next append publishes the killed one's batch, then its own."""
    lab, _ = crash_lab
    store = _fresh_store(crash_lab, tmp_path)
    proc = subprocess.run([sys.executable, "-c", KILLER, str(store), "publish", "2", "0"],
                          capture_output=True, text=True, cwd=lab.root, timeout=300)
    assert proc.returncode == -9, proc.stderr
    tally("kills survived")
    assert _published_as_is(store) is False
    extra = lab.write("incoming/2026-04-02/c9999.csv", "cycle,capacity_ah\n12,2.88\n")
    try:
        result = cli("append", "--store", str(store), cwd=lab.root)
        assert result.returncode == 0, result.stderr
        assert "1 file(s), 1 row(s) loaded" in result.stdout
        assert _published_as_is(store, more=1) is True
        state = audit(store)
        assert state.problems == [] and state.rows == BASE_ROWS + 2 * BIG + 1
    finally:
        extra.unlink()


def test_kills_at_random_moments_from_outside(crash_lab: tuple[Lab, dict[str, bytes]],
                                              tmp_path: Path) -> None:
    """The CLI append killed by the parent after random delays, over and over, on one store."""
    lab, _ = crash_lab
    store = _fresh_store(crash_lab, tmp_path)
    # One undisturbed run tells how long an append takes on this machine, so that the
    # random kills spread over the whole of it (start-up, hashing, writing, commit, close).
    start = time.monotonic()
    assert cli("append", "--store", str(store), cwd=lab.root).returncode == 0
    span = time.monotonic() - start
    store = _fresh_store(crash_lab, tmp_path)
    rng = random.Random(20260401)
    rounds = attack_rounds(6)
    outcomes = {"absent": 0, "present": 0, "finished": 0}
    for _ in range(rounds):
        proc = subprocess.Popen([TRENDLEDGER, "append", "--store", str(store)], cwd=lab.root,
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        time.sleep(rng.uniform(0.15, 0.95) * span)
        proc.kill()
        _, err = proc.communicate(timeout=120)
        if proc.returncode == -9:
            tally("kills survived")
        else:
            assert proc.returncode == 0, err
        state = audit(store)
        assert state.problems == []
        whole = state.batch_is_whole(_big_paths(), 2)
        assert whole is not None, "a killed append left part of its batch"
        if proc.returncode != -9:
            outcomes["finished"] += 1
        else:
            outcomes["present" if whole else "absent"] += 1
        if whole:
            # start over from the clean copy so that the next kill hits a real batch again
            _fresh_store(crash_lab, tmp_path)
    print(f"random kills: {outcomes}")
    _assert_whole_then_complete(store, lab, None)


def test_killed_store_keeps_its_lock_free_and_accepts_readers(
        crash_lab: tuple[Lab, dict[str, bytes]], tmp_path: Path) -> None:
    """SIGKILL mid-transaction leaves no stale lock: readers and writers get in at once."""
    lab, _ = crash_lab
    store = _fresh_store(crash_lab, tmp_path)
    proc = subprocess.run([sys.executable, "-c", KILLER, str(store), "read", "-1", "0"],
                          capture_output=True, text=True, cwd=lab.root, timeout=300)
    assert proc.returncode == -9
    tally("kills survived")
    result = cli("fits", "--wait", "0", "--store", str(store), "--format", "csv")
    assert result.returncode == 0, result.stderr
    assert len(result.stdout.splitlines()) == 1 + 5  # header and the five loaded cells
    with Ledger.open(store, wait=0) as led:
        assert led.con.execute("SELECT count(*) FROM measurements").fetchall() == [(BASE_ROWS,)]


# -- a full disk and a read-only folder --------------------------------------------------------


@pytest.fixture
def small_disk(tmp_path: Path):
    """A 24 MiB tmpfs, mounted for this test only (needs root and a kernel that allows it)."""
    mount = tmp_path / "disk"
    mount.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=24m", "tmpfs", str(mount)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        reason = done.stderr.strip() or f"exit {done.returncode}"
        pytest.skip(f"cannot mount a small tmpfs to fill up ({reason})")
    try:
        yield mount
    finally:
        subprocess.run(["umount", "-l", str(mount)], capture_output=True)


def _fill(folder: Path) -> Path:
    """Take every free byte of the file system that holds ``folder``."""
    filler = folder / "filler"
    fd = os.open(filler, os.O_WRONLY | os.O_CREAT, 0o600)
    try:
        for size in (1 << 20, 1 << 16, 1 << 12, 1):
            block = b"\0" * size
            while True:
                try:
                    os.write(fd, block)
                except OSError as err:
                    assert err.errno in (errno.ENOSPC, errno.EDQUOT)
                    break
    finally:
        os.close(fd)
    return filler


def _state(store: Path) -> tuple:
    with Ledger.open(store, read_only=True) as led:
        return led.con.execute(
            "SELECT (SELECT count(*) FROM measurements), (SELECT count(*) FROM ingest_files), "
            "(SELECT count(*) FROM ingest_batches), (SELECT max(file_id) FROM ingest_files)"
        ).fetchall()[0]


def _lab_with_store_at(tmp_path: Path, store: Path) -> Lab:
    lab = Lab(tmp_path / "lab")
    lab.store = store
    lab.day("2026-03-02", {"c01": [(1, 3.0), (2, 2.99)]})
    with lab.init() as led:
        assert led.append().rows == 2
    return lab


@pytest.mark.parametrize(
    ("files", "rows_each"),
    [(20, 5), (1500, 150)],
    ids=["small-batch-fails-at-commit", "big-batch-fails-while-writing"],
)
def test_full_disk_gives_one_clear_error_and_changes_nothing(
    tmp_path: Path, small_disk: Path, files: int, rows_each: int
) -> None:
    lab = _lab_with_store_at(tmp_path, small_disk / "store.duckdb")
    lab.day("2026-03-03", {
        f"c{i:04d}": [(k, 3.0 - k * 1e-3 - i * 1e-7) for k in range(rows_each)]
        for i in range(files)
    })
    before = _state(lab.store)
    filler = _fill(small_disk)

    result = cli("append", "--store", str(lab.store), cwd=lab.root)
    assert result.returncode == 2, result.stdout + result.stderr
    assert one_clean_line(result.stderr), result.stderr
    assert "could not write the store, nothing was changed" in result.stderr
    assert "No space left on device" in result.stderr
    # still full: the store reads, checks and refuses again in the same way
    assert cli("check", "--store", str(lab.store)).returncode == 0
    assert _state(lab.store) == before
    result = cli("retract", "--batch", "1", "--why", "disk test", "--store", str(lab.store))
    assert result.returncode == 2 and one_clean_line(result.stderr), result.stderr
    assert _state(lab.store) == before

    filler.unlink()
    result = cli("append", "--store", str(lab.store), cwd=lab.root)
    assert result.returncode == 0, result.stderr
    state = audit(lab.store)
    assert state.problems == []
    assert state.rows == 2 + files * rows_each
    assert len(state.loaded) == 1 + files


def test_read_only_mount_is_refused_when_opening(tmp_path: Path, small_disk: Path) -> None:
    lab = _lab_with_store_at(tmp_path, small_disk / "store.duckdb")
    lab.day("2026-03-03", {"c02": [(1, 3.0)]})
    done = subprocess.run(["mount", "-o", "remount,ro", str(small_disk)], capture_output=True)
    if done.returncode != 0:
        pytest.skip("cannot remount the tmpfs read-only")
    result = cli("append", "--store", str(lab.store), cwd=lab.root)
    assert result.returncode == 2 and one_clean_line(result.stderr), result.stderr
    assert "cannot open the store" in result.stderr
    assert cli("check", "--store", str(lab.store)).returncode == 0  # reading still works
    subprocess.run(["mount", "-o", "remount,rw", str(small_disk)], check=True)
    assert cli("append", "--store", str(lab.store), cwd=lab.root).returncode == 0
    assert audit(lab.store).rows == 3


class _Frozen:
    """Make a path unwritable: ``chattr +i`` as root (permission bits do not stop root),
    mode bits otherwise. Skips the test when neither works here."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.root = os.geteuid() == 0

    def __enter__(self) -> _Frozen:
        if self.root:
            if shutil.which("chattr") is None:
                pytest.skip("chattr is not installed; root ignores permission bits")
            done = subprocess.run(["chattr", "+i", str(self.path)], capture_output=True,
                                  text=True)
            if done.returncode != 0:
                pytest.skip(f"this file system has no immutable flag ({done.stderr.strip()})")
        else:
            self.mode = self.path.stat().st_mode
            self.path.chmod(0o555 if self.path.is_dir() else 0o444)
        return self

    def __exit__(self, *exc: object) -> None:
        if self.root:
            subprocess.run(["chattr", "-i", str(self.path)], check=True)
        else:
            self.path.chmod(self.mode)


def test_read_only_folder_gives_one_clear_error_and_changes_nothing(tmp_path: Path) -> None:
    """The store file is writable but its folder is not: the write-ahead log cannot be made."""
    folder = tmp_path / "frozen"
    folder.mkdir()
    lab = _lab_with_store_at(tmp_path, folder / "store.duckdb")
    lab.day("2026-03-03", {f"c{i:02d}": [(1, 3.0), (2, 2.9)] for i in range(30)})
    before = _state(lab.store)
    with _Frozen(folder):
        result = cli("append", "--store", str(lab.store), cwd=lab.root)
        assert result.returncode == 2, result.stdout + result.stderr
        assert one_clean_line(result.stderr), result.stderr
        assert "could not write the store, nothing was changed" in result.stderr
        result = cli("retract", "--batch", "1", "--why", "frozen", "--store", str(lab.store))
        assert result.returncode == 2 and one_clean_line(result.stderr), result.stderr
        assert cli("check", "--store", str(lab.store)).returncode == 0
        assert _state(lab.store) == before
    assert cli("append", "--store", str(lab.store), cwd=lab.root).returncode == 0
    state = audit(lab.store)
    assert state.problems == [] and state.rows == 2 + 60


def test_unreplaceable_published_file_keeps_the_commit_for_the_next_command(
        tmp_path: Path) -> None:
    """The published file cannot be replaced: the batch is committed in the writer's copy,
    the append says the publish failed, readers keep the old state and check says the
    copies differ; once the file can be replaced the next command publishes the batch."""
    lab = _lab_with_store_at(tmp_path, tmp_path / "store.duckdb")
    lab.day("2026-03-03", {"c02": [(1, 3.0)]})
    with _Frozen(lab.store):
        result = cli("append", "--store", str(lab.store), cwd=lab.root)
        assert result.returncode == 2 and one_clean_line(result.stderr), result.stderr
        assert "the change is committed but the read copy could not be published" \
            in result.stderr
        assert _state(lab.store)[0] == 2
        result = cli("check", "--store", str(lab.store))
        assert result.returncode == 1, result.stdout + result.stderr
        assert "published copy and writer's copy differ" in result.stdout
    result = cli("append", "--store", str(lab.store), cwd=lab.root)
    assert result.returncode == 0 and result.stdout.startswith("nothing new"), result.stderr
    assert audit(lab.store).rows == 3


MOVER = textwrap.dedent(
    """
    import os, signal, sys, threading
    from trendledger import Ledger

    store, action, delay = sys.argv[1], sys.argv[2], float(sys.argv[3])
    led = Ledger.open(store)
    threading.Timer(delay, lambda: os.kill(os.getpid(), signal.SIGKILL)).start()
    getattr(led, action)(batch=2, why="killed on purpose")
    os.kill(os.getpid(), signal.SIGKILL)  # done before the timer: die anyway, before close
    """
)


def _moved(store: Path) -> bool:
    """True if the big batch sits wholly in the history, False if wholly in measurements."""
    state = audit(store)
    assert state.problems == []
    with Ledger.open(store, read_only=True) as led:
        con = led.con
        (status,) = con.execute("SELECT status FROM ingest_batches WHERE batch_id = 2"
                                ).fetchall()[0]
        (kept,) = con.execute("SELECT count(*) FROM measurements_history").fetchall()[0]
        fits = con.execute("SELECT count(*) FROM fit_fade").fetchall()[0][0]
    if status == "retracted":
        assert (state.rows, kept, fits) == (BASE_ROWS, 2 * BIG, 5)
        return True
    assert (state.rows, kept, fits) == (BASE_ROWS + 2 * BIG, 0, BIG)  # cells c0000-c1999
    assert state.batch_is_whole(_big_paths(), 2) is True
    return False


@pytest.mark.slow
@pytest.mark.parametrize("delay", [0.0, 0.02, 0.1, 0.4])
def test_retract_and_restore_killed_move_rows_wholly_or_not_at_all(
        crash_lab: tuple[Lab, bytes], tmp_path: Path, delay: float) -> None:
    """The history moves (retract into measurements_history, restore back) are one
    transaction each: killed at any moment, the batch is wholly on one side."""
    lab, _ = crash_lab
    store = _fresh_store(crash_lab, tmp_path)
    with Ledger.open(store) as led:
        assert led.append().rows == 2 * BIG
    for action, done in (("retract", True), ("restore", False)):
        proc = subprocess.run([sys.executable, "-c", MOVER, str(store), action, str(delay)],
                              capture_output=True, text=True, cwd=lab.root, timeout=300)
        assert proc.returncode == -9, proc.stderr
        tally("kills survived")
        if _moved(store) != done:  # killed before COMMIT: finish the step by hand
            with Ledger.open(store) as led:
                getattr(led, action)(batch=2, why="finished by hand")
            assert _moved(store) == done
