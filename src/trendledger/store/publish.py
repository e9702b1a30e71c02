"""The writer's private copy of the store, and the read copy it publishes at the store's path.

DuckDB lets one process write a file, and a process that holds a file open
read-only keeps every writer out. So writers never open the path people read
(``trendledger.duckdb``): they work on a private copy beside it
(``trendledger.duckdb.writer``) and, after each commit, publish it:

1. ``CHECKPOINT`` the writer's copy, so its file holds every committed row and
   no write-ahead log is needed;
2. copy it to ``trendledger.duckdb.publish`` (a reflink that shares blocks where
   the file system can, a kernel copy otherwise) and flush that to disk;
3. rename it over ``trendledger.duckdb`` and flush the folder.

A rename is atomic: a reader that opened the old file keeps reading it (its
snapshot), a connection opened afterwards gets the new one, and the path never
holds half a file. Writers take an exclusive lock on ``trendledger.duckdb.lock``
for the whole command; the lock file also records who holds it and whether a
publish is due. A writer killed after its commit leaves "publish due" behind,
and the next command (a reader or a writer) publishes before it goes on.

A client that opens the published file read-write (the DuckDB command line does
by default) writes, if anything, into that copy and its ``.wal``; the next
publish replaces the file and sets such a log aside, so nothing it did reaches
the store or is replayed into a later copy.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import json
import os
import stat
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb

from trendledger.errors import BusyError, StoreError, first_line

Progress = Callable[[str, int, int], None]

#: Linux ioctl that makes the destination share the source's blocks (btrfs, XFS, bcachefs).
FICLONE = 0x40049409
#: Bytes copied per step when no reflink is possible; progress is reported between steps.
CHUNK = 1 << 20
#: The lock file's record is rewritten in place at a fixed size, so that marking a publish
#: as due needs no new disk block (it still works on a full disk).
RECORD = 512


@dataclass(frozen=True)
class Layout:
    """The files of one store, all beside the path people open."""

    published: Path

    @classmethod
    def of(cls, path: str | Path) -> Layout:
        return cls(Path(path))

    def _beside(self, suffix: str) -> Path:
        return self.published.with_name(self.published.name + suffix)

    @property
    def writer(self) -> Path:
        """The writer's private copy: only trendledger's writing commands open it."""
        return self._beside(".writer")

    @property
    def lock(self) -> Path:
        return self._beside(".lock")

    @property
    def staging(self) -> Path:
        """Where the next published copy is written before it is renamed into place."""
        return self._beside(".publish")

    @property
    def converting(self) -> Path:
        """Where a single-file store's writer's copy is made before it is renamed."""
        return self._beside(".writer.new")

    @property
    def wal(self) -> Path:
        """A write-ahead log beside the published copy: only a foreign read-write client
        writes one."""
        return self._beside(".wal")

    @property
    def writer_wal(self) -> Path:
        return self._beside(".writer.wal")

    def files(self) -> list[Path]:
        """Every file the store may have on disk, the published copy first."""
        return [self.published, self.writer, self.writer_wal, self.lock, self.staging,
                self.converting, self.wal]

    def exists(self) -> bool:
        return self.published.exists() or self.writer.exists()


def utc_text(when: dt.datetime) -> str:
    return when.strftime("%Y-%m-%d %H:%M:%S UTC")


# -- the lock and its record ------------------------------------------------------------------


def read_record(layout: Layout) -> dict[str, Any] | None:
    """What the lock file says (holder, since, whether a publish is due); None if there is
    no lock file, ``{"state": "unknown"}`` if it cannot be read as a record."""
    try:
        raw = layout.lock.read_bytes()
    except FileNotFoundError:
        return None
    except OSError:
        return {"state": "unknown"}
    try:
        found = json.loads(raw.decode("utf-8").strip() or "{}")
    except (UnicodeDecodeError, json.JSONDecodeError):
        return {"state": "unknown"}
    return found if isinstance(found, dict) else {"state": "unknown"}


def publish_due(layout: Layout) -> bool:
    """True when the published copy may lag the writer's: a writer stopped between its
    commit and the end of its publish, or the store has no published copy yet."""
    if not layout.writer.exists():
        return False
    if not layout.published.exists():
        return True
    record = read_record(layout)
    return record is not None and record.get("state") != "published"


class _Held:
    """An exclusive flock on the lock file, shared by the Ledgers of one process."""

    def __init__(self, fd: int) -> None:
        self.fd = fd
        self.count = 1


#: Locks this process holds, by the lock file's real path: a second writing Ledger on the
#: same store in the same process shares the lock (DuckDB shares the database too).
_HELD: dict[str, _Held] = {}


class WriterLock:
    """The right to change one store; held by one process at a time."""

    def __init__(self, layout: Layout, key: str, held: _Held) -> None:
        self.layout = layout
        self._key = key
        self._held = held
        self.released = False

    @classmethod
    def acquire(cls, layout: Layout, *, wait: float, command: str,
                blocking: bool = True) -> WriterLock | None:
        """Take the lock, waiting up to ``wait`` seconds; BusyError names the holder.

        With ``blocking=False`` return None at once when another process has it.
        """
        key = os.path.realpath(layout.lock)
        held = _HELD.get(key)
        if held is not None:
            if not blocking:  # a publish on the side must not run inside our own write
                return None
            held.count += 1
            return cls(layout, key, held)
        try:
            fd = os.open(layout.lock, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as err:
            raise StoreError(f"cannot open the store: {err.strerror}",
                             file=str(layout.published)) from err
        deadline = time.monotonic() + max(wait, 0.0)
        delay = 0.02
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except OSError as err:
                if err.errno not in (errno.EWOULDBLOCK, errno.EACCES, errno.EAGAIN):
                    os.close(fd)
                    raise StoreError(f"cannot lock the store: {err.strerror}",
                                     file=str(layout.published)) from err
            if not blocking:
                os.close(fd)
                return None
            if time.monotonic() >= deadline:
                os.close(fd)
                raise BusyError(busy_message(layout), file=str(layout.published))
            time.sleep(delay)
            delay = min(delay * 2, 0.25)
        held = _Held(fd)
        _HELD[key] = held
        lock = cls(layout, key, held)
        record = read_record(layout) or {}
        state = record.get("state", "published")
        lock._write({"pid": os.getpid(), "since": utc_text(_now()), "command": command[:200],
                     "state": state})
        return lock

    def _write(self, record: dict[str, Any]) -> None:
        body = json.dumps(record).encode("utf-8")
        if len(body) > RECORD - 1:
            record = {**record, "command": ""}
            body = json.dumps(record).encode("utf-8")[:RECORD - 1]
        body = body.ljust(RECORD - 1) + b"\n"
        os.pwrite(self._held.fd, body, 0)
        os.fsync(self._held.fd)

    def mark(self, state: str) -> None:
        """Record ``writing`` (a publish is due once anything commits) or ``published``."""
        record = read_record(self.layout) or {}
        if record.get("state") == state:
            return
        self._write({**record, "state": state})

    def release(self) -> None:
        if self.released:
            return
        self.released = True
        self._held.count -= 1
        if self._held.count == 0:
            _HELD.pop(self._key, None)
            os.close(self._held.fd)  # closing the last descriptor drops the flock


def _now() -> dt.datetime:
    return dt.datetime.now(dt.UTC).replace(tzinfo=None)


def busy_message(layout: Layout) -> str:
    """Who holds the writer's lock, as the busy error says it."""
    record = read_record(layout) or {}
    since = record.get("since") or "an unknown time"
    who = f"pid {record['pid']}" if record.get("pid") else "another process"
    command = record.get("command")
    if command:
        who += f": {command}"
    return (f"another append or retract running since {since} ({who}); "
            "retry or pass --wait SECONDS")


# -- copying ----------------------------------------------------------------------------------


def _fsync_folder(folder: Path) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def copy_file(src: Path, dst: Path, progress: Progress | None = None,
              stage: str = "copy") -> str:
    """Copy ``src`` to ``dst`` (not yet flushed to disk); returns how: "reflink" when the
    copy shares the source's blocks, "copy" otherwise.

    Progress is reported in MiB between steps of the copy.
    """
    with open(src, "rb") as fin, open(dst, "wb") as fout:
        total = os.fstat(fin.fileno()).st_size
        mib = -(-total // CHUNK)
        if progress:
            progress(stage, 0, mib)
        try:
            fcntl.ioctl(fout.fileno(), FICLONE, fin.fileno())
            return "reflink"
        except OSError:
            pass
        done = 0
        while done < total:
            if progress and done:
                progress(stage, done // CHUNK, mib)
            step = min(CHUNK, total - done)
            try:
                n = os.copy_file_range(fin.fileno(), fout.fileno(), step)
            except OSError as err:
                if err.errno not in (errno.EXDEV, errno.ENOSYS, errno.EINVAL, errno.EOPNOTSUPP):
                    raise
                n = 0
            if n == 0:  # no kernel copy here: plain reads and writes from this offset
                fin.seek(done)
                fout.seek(done)
                block = fin.read(step)
                if not block:
                    break
                fout.write(block)
                fout.flush()
                n = len(block)
            done += n
        if progress:
            progress(stage, mib, mib)
    return "copy"


def flush_file(path: Path, like: Path) -> None:
    """Flush a written copy to disk and give it the mode of the file it copies."""
    os.chmod(path, stat.S_IMODE(os.stat(like).st_mode))
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _set_aside_foreign_wal(layout: Layout) -> Path | None:
    """Move a log that a read-write client wrote beside the published copy out of DuckDB's
    way; its changes never belonged to the store (the writer's copy is the store)."""
    if not layout.wal.exists():
        return None
    target = layout.wal.with_name(
        layout.wal.name + "." + _now().strftime("%Y%m%dT%H%M%S%f") + ".discarded")
    try:
        os.replace(layout.wal, target)
    except FileNotFoundError:
        return None
    return target


@dataclass
class Published:
    """What one publish did, for the benchmark and the trace."""

    how: str = ""
    bytes: int = 0
    seconds: float = 0.0
    discarded_wal: Path | None = None


def publish(con: duckdb.DuckDBPyConnection, lock: WriterLock,
            progress: Progress | None = None) -> Published:
    """Publish the writer's copy (open on ``con``) at the store's path; see the module doc.

    Steps, reported to ``progress``: ("checkpoint", 0, 1) before the checkpoint, then
    ("publish", step, 4): 0 checkpointed, 1 copied, 2 flushed, 3 renamed, 4 done. A
    failure leaves the old copy in place and the publish due; the next command does it
    again.
    """
    layout = lock.layout
    start = time.perf_counter()
    if progress:
        progress("checkpoint", 0, 1)
    con.execute("CHECKPOINT")
    result = _publish_file(layout, progress)
    lock.mark("published")
    if progress:
        progress("publish", 4, 4)
    result.seconds = time.perf_counter() - start
    return result


def _publish_file(layout: Layout, progress: Progress | None) -> Published:
    if progress:
        progress("publish", 0, 4)
    try:
        how = copy_file(layout.writer, layout.staging, progress)
        if progress:
            progress("publish", 1, 4)
        flush_file(layout.staging, layout.writer)
        if progress:
            progress("publish", 2, 4)
        result = Published(how=how, bytes=layout.staging.stat().st_size)
        result.discarded_wal = _set_aside_foreign_wal(layout)
        os.replace(layout.staging, layout.published)
        if progress:
            progress("publish", 3, 4)
        # a log written between the first look and the rename belongs to the old copy too
        result.discarded_wal = _set_aside_foreign_wal(layout) or result.discarded_wal
        _fsync_folder(layout.published.parent)
    except OSError as err:
        with contextlib.suppress(OSError):
            layout.staging.unlink()
        raise StoreError(
            f"the change is committed but the read copy could not be published: "
            f"{err.strerror or err}", file=str(layout.published),
            hint="readers see the previous state; the next trendledger command publishes it",
        ) from err
    return result


def _checkpoint_file(path: Path) -> None:
    """Fold a write-ahead log left by a killed writer into its file (DuckDB replays it on
    open and checkpoints on close)."""
    try:
        con = duckdb.connect(str(path))
    except duckdb.Error as err:
        raise StoreError(f"cannot open the store to fold in its write-ahead log: "
                         f"{first_line(err)}", file=str(path)) from err
    try:
        con.execute("CHECKPOINT")
    finally:
        con.close()


def finish_due_publish(lock: WriterLock, progress: Progress | None = None) -> bool:
    """With the lock held: publish what a killed writer committed; True if it did."""
    layout = lock.layout
    if not (publish_due(layout) or (layout.wal.exists() and layout.writer.exists())):
        return False
    _checkpoint_file(layout.writer)
    _publish_file(layout, progress)
    lock.mark("published")
    return True


def convert(lock: WriterLock) -> bool:
    """With the lock held: give a store made by an earlier version (one file, perhaps with
    its write-ahead log) a writer's copy; True if it did. Nothing is lost: a log left by an
    earlier writer is folded into the file first."""
    layout = lock.layout
    if layout.writer.exists() or not layout.published.exists():
        return False
    if layout.wal.exists():
        _checkpoint_file(layout.published)
    temporary = layout.converting
    try:
        copy_file(layout.published, temporary)
        flush_file(temporary, layout.published)
        os.replace(temporary, layout.writer)
        _fsync_folder(layout.writer.parent)
    except OSError as err:
        with contextlib.suppress(OSError):
            temporary.unlink()
        raise StoreError(f"cannot make the writer's copy: {err.strerror or err}",
                         file=str(layout.writer)) from err
    lock.mark("published")
    return True


def settle(path: Path, *, fresh: bool = False) -> bool:
    """Before a read, when no writer is running, publish again if a killed writer left a
    publish due, if a foreign client left a log beside the published copy, or (``fresh``)
    always; True if it did. Best effort: a reader that cannot write the folder reads the
    copy that is there."""
    layout = Layout.of(path)
    if not layout.writer.exists():
        return False
    if not (fresh or publish_due(layout) or layout.wal.exists()):
        return False
    with contextlib.suppress(OSError, StoreError, duckdb.Error):
        lock = WriterLock.acquire(layout, wait=0, command="publish before a read",
                                  blocking=False)
        if lock is None:
            return False
        try:
            _checkpoint_file(layout.writer)
            _publish_file(layout, None)
            lock.mark("published")
            return True
        finally:
            lock.release()
    return False


@contextlib.contextmanager
def held(layout: Layout, *, wait: float, command: str) -> Iterator[WriterLock]:
    lock = WriterLock.acquire(layout, wait=wait, command=command)
    assert lock is not None
    try:
        yield lock
    finally:
        lock.release()


def remove_all(layout: Layout) -> None:
    """Delete every file of a store (``init --force``, or a store that failed to be made)."""
    for path in layout.files():
        path.unlink(missing_ok=True)
