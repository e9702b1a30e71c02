"""Settings of a read connection: no files, no setting changes, bounded memory.

A read-only :class:`~trendledger.ledger.Ledger` (every read command of the CLI)
opens the store with these. DuckDB lets a connection read files in its
temporary folder even with external access off, and by default that folder is
``<store>.tmp`` beside the store, where anyone who can write there could plant
a file; a read connection gets a private, empty folder (mode 0700) instead.
"""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
from pathlib import Path

#: DuckDB memory and spill limits for a read connection.
READ_MEMORY = "2GB"
READ_SPILL = "2GB"

#: A read-only connection that cannot touch files or change its own settings.
LOCKED: dict[str, str | bool] = {
    "enable_external_access": False,
    "autoload_known_extensions": False,
    "autoinstall_known_extensions": False,
    "python_enable_replacements": False,
    "lock_configuration": True,
}

#: One private temporary folder per store and process. DuckDB keeps one database
#: instance per file in a process and refuses a second connection with other
#: settings, so every read connection of a process to one store shares it.
_READ_TEMP: dict[str, str] = {}


def _remove_read_temp() -> None:
    for folder in _READ_TEMP.values():
        shutil.rmtree(folder, ignore_errors=True)


atexit.register(_remove_read_temp)


def read_config(path: Path) -> dict[str, str | bool]:
    """The settings of a read connection to the store at ``path``."""
    key = str(path.resolve())
    folder = _READ_TEMP.get(key)
    if folder is None or not os.path.isdir(folder):
        folder = tempfile.mkdtemp(prefix="trendledger-read-")
        _READ_TEMP[key] = folder
    return {
        **LOCKED,
        "temp_directory": folder,
        "memory_limit": READ_MEMORY,
        "max_temp_directory_size": READ_SPILL,
    }


def private_folders() -> list[Path]:
    """The read connections' temporary folders made by this process."""
    return [Path(p) for p in _READ_TEMP.values()]
