"""Turn the spec's path template into globs and a matcher.

``incoming/{day}/{cell}.csv`` becomes the glob ``incoming/*/*.csv`` and a
regular expression that captures ``day`` and ``cell`` from one path segment each.
"""

from __future__ import annotations

import glob
import os
import re
import stat
from dataclasses import dataclass
from pathlib import Path

from trendledger.spec import FIELD


@dataclass(frozen=True)
class PathTemplate:
    template: str

    @property
    def glob(self) -> str:
        return FIELD.sub("*", self.template)

    @property
    def regex(self) -> re.Pattern[str]:
        parts = FIELD.split(self.template)
        out = []
        for i, part in enumerate(parts):
            # split() alternates literal text and field names
            out.append(f"(?P<{part}>[^/]+)" if i % 2 else re.escape(part))
        # \Z, not $: "$" also matches before a final newline, so "a.csv\n" would pass as "a"
        return re.compile("^" + "".join(out) + r"\Z")

    def match(self, relative: str) -> dict[str, str] | str:
        """The field values of a relative path, or the reason it does not match."""
        m = self.regex.match(relative)
        if m:
            return m.groupdict()
        want = self.template.count("/") + 1
        got = relative.count("/") + 1
        if want != got:
            return (f"does not match the template {self.template!r}: it has {got} path "
                    f"segment(s), the template {want}")
        return f"does not match the template {self.template!r}"


def expand(patterns: list[str], base: Path) -> list[Path]:
    """Files named by the patterns, sorted and without repeats.

    A pattern that names an existing file is taken literally, so file names
    holding glob characters (``a[1].csv``) are never misread as patterns.
    Folders a glob matches are left out; anything else it matches (a pipe, a
    device, a broken link) is kept, so that the append refuses it by name
    instead of passing over it. A folder named outright is kept too.
    """
    found: dict[str, Path] = {}
    for pattern in patterns:
        full = pattern if os.path.isabs(pattern) else str(base / pattern)
        if os.path.lexists(full) and not glob.has_magic(full):
            hits = [full]
        elif os.path.isfile(full):
            hits = [full]
        else:
            hits = [h for h in glob.glob(full, recursive=True) if not os.path.isdir(h)]
        for hit in hits:
            path = Path(os.path.abspath(hit))
            found.setdefault(str(path), path)
    return [found[k] for k in sorted(found)]


def outside(path: Path, root: Path, allowed: tuple[str, ...]) -> str | None:
    """Why ``path`` may not be read, judged by where it really is (links followed), or None.

    ``root`` must be resolved. A file may live in the spec's folder or in a
    folder the spec allows; a link from inside to anywhere else is refused, so a
    link dropped into ``incoming/`` cannot load (or quote) a file elsewhere.
    """
    try:
        real = path.resolve(strict=True)
    except (OSError, RuntimeError):
        return None  # missing or a link loop: the read names the problem
    for folder in (root, *(Path(a).resolve() for a in allowed)):
        if real == folder or folder in real.parents:
            return None
    return ("is a link to a file outside the spec's folder; list its folder in "
            "[source] allow to load it")


def relative_to_root(path: Path, root: Path) -> str | None:
    """The path as the lineage records it (relative to the spec folder), or None if outside.

    ``root`` must already be resolved; the cheap lexical test comes first because
    it is called once per file of a batch.
    """
    try:
        return path.absolute().relative_to(root).as_posix()
    except ValueError:
        try:
            return path.resolve().relative_to(root).as_posix()
        except ValueError:
            return None


def irregular(found: os.stat_result) -> str | None:
    """What a non-regular file is ("a folder", "a named pipe" ...), or None for a file."""
    mode = found.st_mode
    for test, kind in ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a named pipe"),
                       (stat.S_ISSOCK, "a socket"), (stat.S_ISCHR, "a device"),
                       (stat.S_ISBLK, "a device")):
        if test(mode):
            return kind
    return None if stat.S_ISREG(mode) else "not a plain file"


def read_once(path: Path) -> tuple[bytes, os.stat_result]:
    """The bytes of ``path`` and the status of what was read, from one open file.

    Opened without blocking (a named pipe put in the file's place must not hang
    the read) and checked to be a regular file on the open descriptor, so the
    check and the bytes belong to the same file even if the name is swapped.
    """
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
    fd = os.open(path, flags)
    try:
        found = os.fstat(fd)
    except BaseException:
        os.close(fd)
        raise
    kind = irregular(found)
    if kind is not None:
        os.close(fd)
        raise ValueError(f"is {kind}, not a regular file")
    with os.fdopen(fd, "rb") as handle:
        return handle.read(), found
