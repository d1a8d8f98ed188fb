"""The demo's child processes: each in its own process group, stopped by terminate-then-kill.

Every child is started in a new session, so a Ctrl-C at the terminal reaches only the demo,
which then stops the children in order (gateways, service, broker). ``stop_all`` is also
registered with ``atexit``: however the demo ends, it leaves no process behind.
"""

from __future__ import annotations

import atexit
import contextlib
import os
import signal
import subprocess
import time
from collections.abc import Mapping, Sequence
from pathlib import Path

__all__ = ["ChildProcesses"]


class ChildProcesses:
    """Start, watch and stop the demo's child processes."""

    def __init__(self) -> None:
        self._children: list[tuple[str, subprocess.Popen[bytes]]] = []
        self._logs: list[object] = []
        atexit.register(self.stop_all)

    def start(
        self, name: str, argv: Sequence[str], *, env: Mapping[str, str], log: Path
    ) -> subprocess.Popen[bytes]:
        """Start ``argv`` with stdout and stderr to ``log``; the process leads its own group."""
        fh = log.open("ab")
        self._logs.append(fh)
        proc = subprocess.Popen(
            list(argv),
            env=dict(env),
            stdin=subprocess.DEVNULL,
            stdout=fh,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        self._children.append((name, proc))
        return proc

    def latest(self, name: str) -> subprocess.Popen[bytes] | None:
        """The process last started under ``name`` (a restarted child keeps its name)."""
        return next((p for n, p in reversed(self._children) if n == name), None)

    @property
    def pids(self) -> dict[str, int]:
        return {name: p.pid for name, p in self._children}

    def running(self) -> list[str]:
        return [name for name, p in self._children if p.poll() is None]

    @staticmethod
    def stop(procs: Sequence[subprocess.Popen[bytes]], timeout: float = 10.0) -> None:
        """SIGTERM to each process group at once, SIGKILL to those still there after
        ``timeout`` seconds."""
        for proc in procs:
            if proc.poll() is None:
                with contextlib.suppress(ProcessLookupError):
                    os.killpg(proc.pid, signal.SIGTERM)
        deadline = time.monotonic() + timeout
        for proc in procs:
            try:
                proc.wait(max(deadline - time.monotonic(), 0.01))
            except subprocess.TimeoutExpired:
                with contextlib.suppress(ProcessLookupError):
                    os.killpg(proc.pid, signal.SIGKILL)
                proc.wait()
            # whatever the leader left behind in its group goes too
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(proc.pid, signal.SIGKILL)

    def stop_named(self, names: Sequence[str], timeout: float = 10.0) -> None:
        self.stop([p for name, p in self._children if name in names], timeout)

    def stop_all(self, timeout: float = 10.0) -> None:
        """Stop every child, newest first (gateways before the service)."""
        for _, proc in reversed(self._children):
            self.stop([proc], timeout)
        for fh in self._logs:
            with contextlib.suppress(Exception):
                fh.close()  # type: ignore[attr-defined]
        self._logs.clear()
