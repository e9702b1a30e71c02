"""Turn the spec's path template into globs and a matcher.

``incoming/{day}/{cell}.csv`` becomes the glob ``incoming/*/*.csv`` and a
regular expression that captures ``day`` and ``cell`` from one path segment each.
"""

from __future__ import annotations

import glob
import os
import re
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
    """
    found: dict[str, Path] = {}
    for pattern in patterns:
        full = pattern if os.path.isabs(pattern) else str(base / pattern)
        if os.path.isfile(full):
            hits = [full]
        else:
            hits = [h for h in glob.glob(full, recursive=True) if os.path.isfile(h)]
        for hit in hits:
            path = Path(os.path.abspath(hit))
            found.setdefault(str(path), path)
    return [found[k] for k in sorted(found)]


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
