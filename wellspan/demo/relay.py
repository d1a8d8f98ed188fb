"""A TCP relay between one gateway and the broker: counts the bytes and can cut the link.

The demo puts one relay in front of each gateway. Cutting a relay closes its connections and
refuses new ones until it is restored, as a failed radio or satellite link would: the gateway's
agent keeps queueing in its outbox and catches up once the link is back.
"""

from __future__ import annotations

import contextlib
import socket
import threading

__all__ = ["LinkRelay"]

_CHUNK = 65536


class LinkRelay:
    """Listen on 127.0.0.1 (a free port) and forward every connection to ``target``.

    Attributes
    ----------
    bytes_up, bytes_down : int
        Bytes forwarded from the gateway to the broker and back, over the relay's life.
    cuts : int
        How many times the link was cut.
    """

    def __init__(self, target: tuple[str, int], *, name: str = "relay") -> None:
        self.target = target
        self.name = name
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.2)
        self.port: int = self._listener.getsockname()[1]
        self._lock = threading.Lock()
        self._open: set[socket.socket] = set()
        self._up = True
        self._closed = threading.Event()
        self.bytes_up = 0
        self.bytes_down = 0
        self.cuts = 0
        self._thread = threading.Thread(target=self._accept, name=f"{name}-accept", daemon=True)

    @property
    def url(self) -> str:
        return f"mqtt://127.0.0.1:{self.port}"

    @property
    def up(self) -> bool:
        return self._up

    def start(self) -> LinkRelay:
        self._thread.start()
        return self

    def cut(self) -> None:
        """Drop the link: close every connection, refuse new ones."""
        with self._lock:
            if not self._up:
                return
            self._up = False
            self.cuts += 1
            victims = list(self._open)
        for s in victims:
            _close(s)

    def restore(self) -> None:
        with self._lock:
            self._up = True

    def close(self) -> None:
        self._closed.set()
        self.cut()
        _close(self._listener)
        self._thread.join(timeout=2)

    def _accept(self) -> None:
        while not self._closed.is_set():
            try:
                client, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            if not self._up:
                _close(client)
                continue
            try:
                upstream = socket.create_connection(self.target, timeout=5)
            except OSError:
                _close(client)
                continue
            for s in (client, upstream):
                s.settimeout(None)
                s.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            with self._lock:
                if not self._up:
                    _close(client)
                    _close(upstream)
                    continue
                self._open.update((client, upstream))
            for src, dst, up in ((client, upstream, True), (upstream, client, False)):
                threading.Thread(
                    target=self._pump, args=(src, dst, up), name=f"{self.name}-pump", daemon=True
                ).start()

    def _pump(self, src: socket.socket, dst: socket.socket, up: bool) -> None:
        try:
            while True:
                data = src.recv(_CHUNK)
                if not data:
                    break
                dst.sendall(data)
                with self._lock:
                    if up:
                        self.bytes_up += len(data)
                    else:
                        self.bytes_down += len(data)
        except OSError:
            pass
        finally:
            with self._lock:
                self._open.discard(src)
                self._open.discard(dst)
            _close(src)
            _close(dst)

    def __repr__(self) -> str:
        return f"LinkRelay(port={self.port}, target={self.target}, up={self._up})"


def _close(s: socket.socket) -> None:
    with contextlib.suppress(OSError):
        s.shutdown(socket.SHUT_RDWR)
    with contextlib.suppress(OSError):
        s.close()
