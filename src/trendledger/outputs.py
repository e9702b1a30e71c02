"""Where the tool may write: only what it creates or owns, never the store.

``query --out``, ``report --out`` and ``export`` write files for the user. The
rules they share:

* never onto the store, its write-ahead log or a temporary folder DuckDB uses
  for it (``<store>.tmp``, the private folder of read connections);
* never through a symbolic link: a file is written beside its final name and
  renamed over it, which replaces a link instead of following it, and a link
  among the files an output owns is refused;
* never over a file the tool did not write, unless ``force`` says so; a folder
  proves what it holds with a marker (the report) or a manifest (the export).
"""

from __future__ import annotations

import os
import stat
import tempfile
from collections.abc import Callable
from pathlib import Path

from trendledger.errors import TrendledgerError
from trendledger.store import sandbox


class OutputError(TrendledgerError):
    """An output path is refused (the store, a link, a foreign file) or cannot be written."""


def protected(store: Path | None) -> list[Path]:
    """The store's own files and folders, resolved: no output may land in them."""
    if store is None:
        return []
    base = Path(os.path.abspath(store))
    found = [base, base.with_name(base.name + ".wal"), base.with_name(base.name + ".tmp")]
    found += sandbox.private_folders()
    return [p.resolve() for p in found]


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def check_not_store(path: Path, store: Path | None, what: str) -> None:
    """Refuse ``path`` (a file or folder to write) if it is or lies in the store's files.

    Both where the name sits and where a link there points are checked.
    """
    location = Path(os.path.abspath(path))
    candidates = {location.parent.resolve() / location.name, location.resolve()}
    for guarded in protected(store):
        for candidate in candidates:
            if _inside(candidate, guarded):
                raise OutputError(f"{what} would overwrite the store's own files",
                                  file=str(path), hint="choose another path")


def check_file(path: Path, store: Path | None, *, force: bool, what: str) -> None:
    """Refuse writing one output file at ``path`` unless it is new or ``force`` is given."""
    check_not_store(path, store, what)
    try:
        found = os.lstat(path)
    except FileNotFoundError:
        return
    except OSError as err:
        raise OutputError(f"cannot write {what}: {err.strerror}", file=str(path)) from err
    if stat.S_ISDIR(found.st_mode):
        raise OutputError(f"{what} is a folder", file=str(path), hint="name a file")
    if not force:
        kind = "a symbolic link" if stat.S_ISLNK(found.st_mode) else "a file"
        raise OutputError(f"{kind} is already there", file=str(path),
                          hint="pass --force to replace it, or choose another name")


def write_file(path: Path, store: Path | None, writer: Callable[[Path], None], *,
               force: bool, what: str) -> None:
    """Write ``path`` through ``writer`` (given a temporary path in the same folder).

    The new file replaces the old name in one rename, so a reader never sees half
    a file, and a link at ``path`` is replaced rather than followed. Without
    ``force`` the rename refuses to replace anything, even a file that appeared
    meanwhile.
    """
    check_file(path, store, force=force, what=what)
    folder = Path(os.path.abspath(path)).parent
    try:
        handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.", dir=folder)
    except OSError as err:
        raise OutputError(f"cannot write {what}: {err.strerror}", file=str(path)) from err
    os.close(handle)
    scratch = Path(temporary)
    try:
        writer(scratch)
        if force:
            os.replace(scratch, path)
        else:
            _place_new(scratch, path)
    except FileExistsError as err:
        raise OutputError("a file appeared there while writing", file=str(path),
                          hint="pass --force to replace it") from err
    except OSError as err:
        raise OutputError(f"cannot write {what}: {err.strerror}", file=str(path)) from err
    finally:
        scratch.unlink(missing_ok=True)


def _place_new(scratch: Path, path: Path) -> None:
    """Give ``scratch`` the name ``path`` only if no file has it (a hard link fails if the
    name exists; where hard links are not supported, check and rename)."""
    try:
        os.link(scratch, path)
    except FileExistsError:
        raise
    except OSError:
        if os.path.lexists(path):
            raise FileExistsError(str(path)) from None
        os.replace(scratch, path)


def no_links(folder: Path, names: list[str] | None = None) -> None:
    """Refuse if ``folder`` holds a symbolic link (anywhere below, or among ``names``)."""
    if names is not None:
        entries = [folder / name for name in names]
    else:
        entries = []
        for top, dirs, files in os.walk(folder):
            entries += [Path(top) / n for n in (*dirs, *files)]
    for entry in entries:
        if entry.is_symlink():
            raise OutputError("a symbolic link where the tool writes; outputs never follow "
                              "links", file=str(entry), hint="remove the link")


def write_owned(folder: Path, files: dict[str, bytes], store: Path | None, *, force: bool,
                marker: str, what: str) -> list[str]:
    """Write ``files`` (name -> bytes) into ``folder``, which the tool owns or creates.

    ``marker`` (a hidden file in the folder) lists what an earlier run wrote
    there: those files may be replaced, and the ones not written again are
    removed. Any other file in the way is refused unless ``force``; nothing is
    written until every name has been checked. Returns the names removed.
    """
    check_not_store(folder, store, what)
    if folder.is_symlink() and not folder.is_dir():
        raise OutputError(f"{what} folder is a broken link", file=str(folder))
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{what} folder is a file", file=str(folder), hint="name a folder")
    ours = _owned(folder / marker)
    for name in files:
        path = folder / name
        if name in ours and path.is_file() and not path.is_symlink():
            continue
        check_file(path, store, force=force, what=what)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputError(f"cannot write {what}: {err.strerror}", file=str(folder)) from err
    for name, data in files.items():
        write_file(folder / name, store, _bytes_writer(data), force=True, what=what)
    removed = []
    for name in sorted(ours - set(files)):
        stale = folder / name
        if "/" not in name and stale.is_file() and not stale.is_symlink():
            stale.unlink()
            removed.append(name)
    listing = "".join(f"{name}\n" for name in sorted(files)).encode("utf-8")
    write_file(folder / marker, store, _bytes_writer(listing), force=True, what=what)
    return removed


def _bytes_writer(data: bytes) -> Callable[[Path], None]:
    def writer(scratch: Path) -> None:
        scratch.write_bytes(data)

    return writer


def _owned(marker: Path) -> set[str]:
    """The names an earlier run listed in its marker (a regular file, not a link)."""
    try:
        if marker.is_symlink() or not marker.is_file():
            return set()
        return {line for line in marker.read_text(encoding="utf-8").splitlines() if line}
    except (OSError, UnicodeDecodeError):
        return set()
