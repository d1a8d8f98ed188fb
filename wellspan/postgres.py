"""A private PostgreSQL instance in a temporary folder, on a free loopback port, trust auth.

Used by the chaos run (`wellspan.chaos`), which kills and restarts the database: a private
instance keeps that away from the shared server other tests use. ``initdb`` and ``pg_ctl`` run
as the ``postgres`` user (through ``runuser`` when we are root), in a folder that user owns.
`kill` sends SIGKILL to the postmaster, as a crash would; `start` brings it back with crash
recovery from its write-ahead log.
"""

from __future__ import annotations

import contextlib
import glob
import os
import pwd
import shutil
import signal
import subprocess
import tempfile
import time
from pathlib import Path

from wellspan.mosquitto import free_port

__all__ = ["PostgresMissingError", "PrivatePostgres", "postgres_bin_dir"]

INSTALL_HINT = "install it with: sudo apt-get install -y postgresql"
_USER = "postgres"


class PostgresMissingError(RuntimeError):
    """The PostgreSQL server binaries (initdb, pg_ctl) are not installed, or cannot be run."""


def postgres_bin_dir() -> Path | None:
    """The newest ``/usr/lib/postgresql/*/bin`` holding ``initdb`` and ``pg_ctl``, if any."""
    found = []
    for d in glob.glob("/usr/lib/postgresql/*/bin"):
        p = Path(d)
        if (p / "initdb").exists() and (p / "pg_ctl").exists():
            with contextlib.suppress(ValueError):
                found.append((float(p.parent.name), p))
    if not found:
        on_path = shutil.which("pg_ctl")
        return Path(on_path).parent if on_path and shutil.which("initdb") else None
    return max(found)[1]


class PrivatePostgres:
    """One PostgreSQL cluster of our own: ``start()``, ``kill()``, ``start()`` again, ``stop()``.

    Parameters
    ----------
    database : str
        A database of this name is created at the first start.
    port : int, optional
        Default: a free port on 127.0.0.1 (kept across restarts).

    Raises
    ------
    PostgresMissingError
        If the binaries are not installed, or we are root and there is no ``postgres`` user.
    """

    host = "127.0.0.1"

    def __init__(self, *, database: str = "wellspan", port: int | None = None) -> None:
        bindir = postgres_bin_dir()
        if bindir is None:
            raise PostgresMissingError(
                f"PostgreSQL server binaries (initdb, pg_ctl) not found under "
                f"/usr/lib/postgresql/*/bin or on PATH; {INSTALL_HINT}"
            )
        self.bindir = bindir
        self._as: list[str] = []
        self._owner: pwd.struct_passwd | None = None
        if os.geteuid() == 0:  # PostgreSQL refuses to run as root
            try:
                self._owner = pwd.getpwnam(_USER)
            except KeyError:
                raise PostgresMissingError(
                    f"running as root, but there is no '{_USER}' user to run PostgreSQL as; "
                    f"{INSTALL_HINT}"
                ) from None
            runuser = shutil.which("runuser")
            if runuser is None:
                raise PostgresMissingError("running as root, but 'runuser' is not installed")
            self._as = [runuser, "-u", _USER, "--"]
        self.database = database
        self.port = port or free_port()
        self.folder = Path(tempfile.mkdtemp(prefix="wellspan-pg-"))
        if self._owner is not None:
            os.chown(self.folder, self._owner.pw_uid, self._owner.pw_gid)
        self.data = self.folder / "data"
        self.log = self.folder / "postgres.log"
        self.kills = 0
        self._initialised = False

    @property
    def user(self) -> str:
        return self._owner.pw_name if self._owner is not None else pwd.getpwuid(os.geteuid())[0]

    @property
    def url(self) -> str:
        """SQLAlchemy URL of the database (psycopg driver)."""
        return f"postgresql+psycopg://{self.user}@{self.host}:{self.port}/{self.database}"

    def _run(self, *argv: str, timeout: float = 120.0) -> subprocess.CompletedProcess[str]:
        try:
            return subprocess.run(
                [*self._as, *argv],
                capture_output=True,
                text=True,
                timeout=timeout,
                check=True,
                cwd=self.folder,
            )
        except subprocess.CalledProcessError as exc:
            raise RuntimeError(
                f"{Path(argv[0]).name} failed ({exc.returncode}): "
                f"{(exc.stderr or exc.stdout).strip()[-800:]}"
            ) from None

    def _init(self) -> None:
        self._run(
            str(self.bindir / "initdb"), "-D", str(self.data), "-A", "trust", "-U", self.user,
            "-E", "UTF8", "--no-instructions",
        )  # fmt: skip
        self._initialised = True

    def start(self) -> None:
        """Start (initialising the cluster and creating the database the first time)."""
        first = not self._initialised
        if first:
            self._init()
        if self.running:
            return
        options = (
            f"-p {self.port} -c listen_addresses={self.host} -k {self.folder} "
            "-c max_connections=100"
        )
        self._run(
            str(self.bindir / "pg_ctl"), "-D", str(self.data), "-l", str(self.log),
            "-w", "-t", "120", "-o", options, "start",
        )  # fmt: skip
        if first:
            self._run(
                str(self.bindir / "createdb"), "-h", self.host, "-p", str(self.port),
                "-U", self.user, self.database,
            )  # fmt: skip

    @property
    def pid(self) -> int | None:
        """The postmaster's pid while it runs."""
        try:
            pid = int((self.data / "postmaster.pid").read_text().split("\n", 1)[0])
        except (OSError, ValueError):
            return None
        return pid if _alive(pid) else None  # a killed one may linger as a zombie

    @property
    def running(self) -> bool:
        return self.pid is not None

    def kill(self, *, wait_s: float = 15.0) -> None:
        """SIGKILL the postmaster, then wait for its backends to notice and exit (SIGKILL to
        any still there after ``wait_s``), so the next start finds no shared memory in use."""
        pid = self.pid
        if pid is None:
            return
        children = _children(pid)
        os.kill(pid, signal.SIGKILL)
        self.kills += 1
        deadline = time.monotonic() + wait_s
        left = [pid, *children]
        while left and time.monotonic() < deadline:
            left = [p for p in left if _alive(p)]
            time.sleep(0.05)
        for p in left:
            with contextlib.suppress(ProcessLookupError):
                os.kill(p, signal.SIGKILL)
        # A dead postmaster can linger as a zombie until its (adoptive) parent reaps it, and the
        # next postmaster takes a zombie's pid in the lock file for a live server: the lock file
        # of a postmaster known dead goes.
        deadline = time.monotonic() + 2.0
        while _exists(pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        if _exists(pid):
            with contextlib.suppress(FileNotFoundError):
                (self.data / "postmaster.pid").unlink()

    def stop(self) -> None:
        """Stop the server (fast shutdown) if it runs."""
        if self.running:
            try:
                self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "fast",
                          "-w", "stop", timeout=60)  # fmt: skip
            except (RuntimeError, subprocess.TimeoutExpired):
                self.kill()

    def remove(self) -> None:
        """Stop and delete the cluster's folder."""
        self.stop()
        shutil.rmtree(self.folder, ignore_errors=True)

    def __enter__(self) -> PrivatePostgres:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.remove()

    def __repr__(self) -> str:
        return f"PrivatePostgres(port={self.port}, running={self.running}, kills={self.kills})"


def _children(pid: int) -> list[int]:
    out: list[int] = []
    with contextlib.suppress(OSError):
        for task in os.listdir(f"/proc/{pid}/task"):
            text = Path(f"/proc/{pid}/task/{task}/children").read_text()
            out.extend(int(c) for c in text.split())
    return out


def _exists(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False
