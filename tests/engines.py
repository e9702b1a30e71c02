"""Throwaway engines for the export tests: a PostgreSQL cluster and a Spark session.

Both are started by the tests themselves and bound to 127.0.0.1 only. A missing engine
makes its tests skip with the reason (see ``make system`` for the Debian packages).
"""

from __future__ import annotations

import contextlib
import glob
import os
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def postgres_bin() -> Path | None:
    """The newest PostgreSQL server binaries of the Debian package, or on PATH."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                   key=lambda p: int(Path(p).parent.parent.name)
                   if Path(p).parent.parent.name.isdigit() else 0)
    if found:
        return Path(found[-1]).parent
    on_path = shutil.which("initdb")
    return Path(on_path).parent if on_path else None


@dataclass(frozen=True)
class Postgres:
    port: int
    user: str = "trendledger"
    dbname: str = "postgres"

    @property
    def dsn(self) -> str:
        return f"host=127.0.0.1 port={self.port} user={self.user} dbname={self.dbname}"


@contextlib.contextmanager
def postgres_cluster() -> Iterator[Postgres]:
    """initdb in a temporary folder, start on a free port on 127.0.0.1, stop and delete.

    initdb refuses to run as root, so as root the cluster belongs to the ``postgres``
    system user of the Debian package.
    """
    bindir = postgres_bin()
    if bindir is None:
        raise LookupError("no PostgreSQL server binaries (Debian package postgresql)")
    prefix: list[str] = []
    folder = Path(tempfile.mkdtemp(prefix="trendledger-pg-"))
    if os.geteuid() == 0:
        runuser = shutil.which("runuser")
        if runuser is None:
            raise LookupError("running as root without runuser to start PostgreSQL")
        try:
            shutil.chown(folder, "postgres", "postgres")
        except (LookupError, PermissionError) as err:
            raise LookupError(f"no postgres system user to own the cluster: {err}") from err
        prefix = [runuser, "-u", "postgres", "--"]
    data = folder / "data"
    port = free_port()
    server = Postgres(port)
    try:
        subprocess.run([*prefix, str(bindir / "initdb"), "-D", str(data), "-A", "trust",
                        "-U", server.user, "-E", "UTF8", "--locale=C", "--no-sync"],
                       check=True, capture_output=True)
        options = (f"-c listen_addresses=127.0.0.1 -p {port} -k {folder} "
                   "-c fsync=off -c full_page_writes=off -c synchronous_commit=off")
        subprocess.run([*prefix, str(bindir / "pg_ctl"), "-D", str(data), "-o", options,
                        "-l", str(folder / "log"), "-w", "-t", "60", "start"],
                       check=True, capture_output=True)
        try:
            yield server
        finally:
            subprocess.run([*prefix, str(bindir / "pg_ctl"), "-D", str(data), "-m", "fast",
                            "-w", "stop"], capture_output=True)
    except subprocess.CalledProcessError as err:
        log = folder / "log"
        detail = log.read_text(errors="replace")[-2000:] if log.is_file() else ""
        raise RuntimeError(f"{err.cmd[len(prefix)]} failed: {err.stderr!r} {detail}") from err
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def spark_session(tmp: Path) -> Any:
    """A local[2] Spark session on 127.0.0.1 with the web UI off."""
    from pyspark.sql import SparkSession

    os.environ.setdefault("SPARK_LOCAL_IP", "127.0.0.1")  # the JVM's own address too
    session = (
        SparkSession.builder.master("local[2]").appName("trendledger-tests")
        .config("spark.ui.enabled", "false")
        .config("spark.driver.host", "127.0.0.1")
        .config("spark.driver.bindAddress", "127.0.0.1")
        .config("spark.sql.shuffle.partitions", "2")
        # the views are long expressions: give the planner room, join by shuffle, and
        # skip whole-stage code generation (it outgrows Java's 64 KB method limit on
        # them, logs the failure and falls back; off is about twice as fast here)
        .config("spark.driver.memory", "3g")
        .config("spark.sql.autoBroadcastJoinThreshold", "-1")
        .config("spark.sql.codegen.wholeStage", "false")
        .config("spark.sql.warehouse.dir", str(tmp / "warehouse"))
        .config("spark.driver.extraJavaOptions", f"-Dderby.system.home={tmp / 'derby'}")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    return session
