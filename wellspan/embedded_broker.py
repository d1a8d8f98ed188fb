"""A small MQTT 5.0 broker in Python, for the demo on a machine without Mosquitto.

It implements what the gateways and the service use, per the MQTT 5.0 OASIS standard: CONNECT
with clean start, session expiry and receive maximum; QoS 0 and 1 (QoS 2 is refused in CONNACK's
Maximum QoS); retained messages; will messages; persistent sessions that keep unacknowledged and
queued messages across reconnects (resent with DUP); wildcard subscriptions (``+``, ``#``),
retain handling, no-local and retain-as-published; shared subscriptions (``$share/group/...``,
one member per message, round robin over the connected members). Not implemented: QoS 2, AUTH,
topic aliases, message expiry, TLS, authentication. It keeps everything in memory and listens
on 127.0.0.1 only: it is for the demo, not for a deployment (use Mosquitto, deploy/mosquitto/).
"""

from __future__ import annotations

import contextlib
import itertools
import socket
import struct
import threading
from collections import OrderedDict, deque
from dataclasses import dataclass, field

__all__ = ["EmbeddedBroker"]

# packet types
_CONNECT, _CONNACK, _PUBLISH, _PUBACK = 1, 2, 3, 4
_SUBSCRIBE, _SUBACK, _UNSUBSCRIBE, _UNSUBACK = 8, 9, 10, 11
_PINGREQ, _PINGRESP, _DISCONNECT = 12, 13, 14

# property identifier -> wire type (MQTT 5.0, section 2.2.2.2)
_PROPERTY_TYPES: dict[int, str] = {
    **dict.fromkeys((0x01, 0x17, 0x19, 0x24, 0x25, 0x28, 0x29, 0x2A), "byte"),
    **dict.fromkeys((0x13, 0x21, 0x22, 0x23), "u16"),
    **dict.fromkeys((0x02, 0x11, 0x18, 0x27), "u32"),
    0x0B: "varint",
    **dict.fromkeys((0x03, 0x08, 0x12, 0x15, 0x1A, 0x1C, 0x1F), "str"),
    **dict.fromkeys((0x09, 0x16), "bin"),
    0x26: "pair",
}
_SESSION_EXPIRY, _RECEIVE_MAXIMUM, _TOPIC_ALIAS, _SUBSCRIPTION_ID = 0x11, 0x21, 0x23, 0x0B
_ASSIGNED_CLIENT_ID, _MAXIMUM_QOS, _RETAIN_AVAILABLE = 0x12, 0x24, 0x25
_WILDCARDS, _SHARED_AVAILABLE = 0x28, 0x2A


class _ProtocolError(Exception):
    pass


def _varint(n: int) -> bytes:
    out = bytearray()
    while True:
        byte, n = n % 128, n // 128
        out.append(byte | (0x80 if n else 0))
        if not n:
            return bytes(out)


def _string(s: str) -> bytes:
    b = s.encode("utf-8")
    return struct.pack("!H", len(b)) + b


class _Reader:
    def __init__(self, data: bytes) -> None:
        self.data = data
        self.pos = 0

    def take(self, n: int) -> bytes:
        if self.pos + n > len(self.data):
            raise _ProtocolError("packet shorter than its fields")
        out = self.data[self.pos : self.pos + n]
        self.pos += n
        return out

    def byte(self) -> int:
        return self.take(1)[0]

    def u16(self) -> int:
        return int(struct.unpack("!H", self.take(2))[0])

    def u32(self) -> int:
        return int(struct.unpack("!I", self.take(4))[0])

    def varint(self) -> int:
        value, shift = 0, 0
        for _ in range(4):
            b = self.byte()
            value |= (b & 0x7F) << shift
            if not b & 0x80:
                return value
            shift += 7
        raise _ProtocolError("malformed variable byte integer")

    def binary(self) -> bytes:
        return self.take(self.u16())

    def string(self) -> str:
        try:
            return self.binary().decode("utf-8")
        except UnicodeDecodeError:
            raise _ProtocolError("string is not UTF-8") from None

    def rest(self) -> bytes:
        return self.take(len(self.data) - self.pos)

    def properties(self) -> list[tuple[int, bytes, object]]:
        """(identifier, raw encoding, value) of each property."""
        end = self.varint() + self.pos
        out: list[tuple[int, bytes, object]] = []
        while self.pos < end:
            start = self.pos
            ident = self.varint()
            kind = _PROPERTY_TYPES.get(ident)
            value: object
            if kind == "byte":
                value = self.byte()
            elif kind == "u16":
                value = self.u16()
            elif kind == "u32":
                value = self.u32()
            elif kind == "varint":
                value = self.varint()
            elif kind == "str":
                value = self.string()
            elif kind == "bin":
                value = self.binary()
            elif kind == "pair":
                value = (self.string(), self.string())
            else:
                raise _ProtocolError(f"unknown property 0x{ident:02x}")
            out.append((ident, self.data[start : self.pos], value))
        if self.pos != end:
            raise _ProtocolError("property length does not match")
        return out


def _packet(kind: int, flags: int, body: bytes) -> bytes:
    return bytes([kind << 4 | flags]) + _varint(len(body)) + body


def _props(raw: bytes = b"") -> bytes:
    return _varint(len(raw)) + raw


def _matches(topic_filter: str, topic: str) -> bool:
    if topic.startswith("$") and not topic_filter.startswith("$"):
        return False
    f_parts, t_parts = topic_filter.split("/"), topic.split("/")
    for i, part in enumerate(f_parts):
        if part == "#":
            return True
        if i >= len(t_parts) or (part != "+" and part != t_parts[i]):
            return False
    return len(f_parts) == len(t_parts)


@dataclass
class _Message:
    topic: str
    payload: bytes
    qos: int
    retain: bool
    properties: bytes  # raw, already filtered for forwarding


@dataclass
class _Subscription:
    qos: int
    no_local: bool
    retain_as_published: bool


@dataclass
class _Session:
    client_id: str
    expiry_s: int = 0
    receive_max: int = 65535
    subs: dict[str, _Subscription] = field(default_factory=dict)  # filter (with $share) -> sub
    inflight: OrderedDict[int, _Message] = field(default_factory=OrderedDict)
    queue: deque[_Message] = field(default_factory=deque)
    conn: _Connection | None = None
    _ids: itertools.count[int] = field(default_factory=lambda: itertools.count(1))

    def next_id(self) -> int:
        while True:
            pid = next(self._ids) % 65536
            if pid and pid not in self.inflight:
                return pid


class _Connection:
    def __init__(self, broker: EmbeddedBroker, sock: socket.socket) -> None:
        self.broker = broker
        self.sock = sock
        self.lock = threading.Lock()
        self.session: _Session | None = None
        self.will: _Message | None = None
        self.closed = False

    def send(self, data: bytes) -> None:
        with self.lock:
            if self.closed:
                return
            try:
                self.sock.sendall(data)
            except OSError:
                self.close()

    def close(self) -> None:
        self.closed = True
        with contextlib.suppress(OSError):
            self.sock.shutdown(socket.SHUT_RDWR)
        with contextlib.suppress(OSError):
            self.sock.close()

    def _read_exact(self, n: int) -> bytes:
        buf = bytearray()
        while len(buf) < n:
            chunk = self.sock.recv(n - len(buf))
            if not chunk:
                raise ConnectionError("closed")
            buf += chunk
        return bytes(buf)

    def read_packet(self) -> tuple[int, int, bytes]:
        first = self._read_exact(1)[0]
        length, shift = 0, 0
        for _ in range(4):
            b = self._read_exact(1)[0]
            length |= (b & 0x7F) << shift
            if not b & 0x80:
                break
            shift += 7
        else:
            raise _ProtocolError("malformed remaining length")
        return first >> 4, first & 0x0F, self._read_exact(length) if length else b""


class EmbeddedBroker:
    """An in-process MQTT 5.0 broker on ``127.0.0.1:port`` (see the module docstring)."""

    host = "127.0.0.1"

    def __init__(self, port: int = 0) -> None:
        self._listener = socket.create_server((self.host, port))
        self._listener.settimeout(0.2)
        self.port: int = self._listener.getsockname()[1]
        self._lock = threading.RLock()
        self._sessions: dict[str, _Session] = {}
        self._retained: dict[str, _Message] = {}
        self._round_robin: dict[str, int] = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._accept, name="mqtt-broker", daemon=True)
        self._connections: set[_Connection] = set()
        self.pid: int | None = None  # in this process

    @property
    def url(self) -> str:
        return f"mqtt://{self.host}:{self.port}"

    @property
    def running(self) -> bool:
        return self._thread.is_alive()

    def start(self) -> None:
        if not self._thread.is_alive():
            self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        with contextlib.suppress(OSError):
            self._listener.close()
        for conn in list(self._connections):
            conn.close()
        if self._thread.is_alive():
            self._thread.join(timeout=2)

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                sock, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            conn = _Connection(self, sock)
            self._connections.add(conn)
            threading.Thread(target=self._serve, args=(conn,), daemon=True).start()

    # -- one connection ----------------------------------------------------------------------

    def _serve(self, conn: _Connection) -> None:
        graceful = False
        try:
            conn.sock.settimeout(10.0)
            kind, _, body = conn.read_packet()
            if kind != _CONNECT:
                raise _ProtocolError("first packet is not CONNECT")
            keepalive = self._connect(conn, body)
            conn.sock.settimeout(keepalive * 1.5 if keepalive else None)
            while not conn.closed:
                kind, flags, body = conn.read_packet()
                if kind == _PUBLISH:
                    self._publish_in(conn, flags, body)
                elif kind == _PUBACK:
                    self._puback_in(conn, body)
                elif kind == _SUBSCRIBE:
                    self._subscribe(conn, body)
                elif kind == _UNSUBSCRIBE:
                    self._unsubscribe(conn, body)
                elif kind == _PINGREQ:
                    conn.send(bytes([_PINGRESP << 4, 0]))
                elif kind == _DISCONNECT:
                    graceful = self._disconnect_in(conn, body)
                    break
                else:
                    raise _ProtocolError(f"packet type {kind} not supported")
        except (OSError, ConnectionError, _ProtocolError):
            pass
        finally:
            self._closed(conn, graceful)

    def _connect(self, conn: _Connection, body: bytes) -> int:
        r = _Reader(body)
        name, level = r.string(), r.byte()
        if name != "MQTT" or level != 5:
            conn.send(_packet(_CONNACK, 0, bytes([0, 0x84]) + _props()))  # unsupported version
            raise _ProtocolError("only MQTT 5.0 is supported")
        flags, keepalive = r.byte(), r.u16()
        props = {i: v for i, _, v in r.properties()}
        client_id = r.string()
        will = None
        if flags & 0x04:
            will_props = r.properties()
            topic, payload = r.string(), r.binary()
            will = _Message(topic, payload, (flags >> 3) & 0x03, bool(flags & 0x20),
                            _forwardable(will_props))  # fmt: skip
        if flags & 0x80:
            r.string()  # user name: the embedded broker lets everyone in
        if flags & 0x40:
            r.binary()
        assigned = None
        if not client_id:
            client_id = assigned = f"auto-{id(conn):x}"
        expiry = int(props.get(_SESSION_EXPIRY, 0))  # type: ignore[call-overload]
        receive_max = int(props.get(_RECEIVE_MAXIMUM, 65535))  # type: ignore[call-overload]
        with self._lock:
            old = self._sessions.get(client_id)
            if old is not None and old.conn is not None:
                taken = old.conn
                old.conn = None
                taken.send(_packet(_DISCONNECT, 0, bytes([0x8E]) + _props()))
                taken.close()
            if flags & 0x02 or old is None:  # clean start
                session = _Session(client_id)
                present = False
            else:
                session, present = old, True
            session.expiry_s, session.receive_max = expiry, max(receive_max, 1)
            session.conn = conn
            self._sessions[client_id] = session
            conn.session, conn.will = session, will
            raw = bytes(
                [_MAXIMUM_QOS, 1, _RETAIN_AVAILABLE, 1, _WILDCARDS, 1, _SHARED_AVAILABLE, 1]
            ) + (bytes([_ASSIGNED_CLIENT_ID]) + _string(assigned) if assigned else b"")
            conn.send(_packet(_CONNACK, 0, bytes([1 if present else 0, 0]) + _props(raw)))
            for pid, msg in session.inflight.items():  # resend what was not acknowledged
                conn.send(self._publish_packet(msg, pid, dup=True))
            self._pump(session)
        return keepalive

    def _publish_in(self, conn: _Connection, flags: int, body: bytes) -> None:
        qos, retain = (flags >> 1) & 0x03, bool(flags & 0x01)
        if qos > 1:
            raise _ProtocolError("QoS 2 is not supported (Maximum QoS 1)")
        r = _Reader(body)
        topic = r.string()
        pid = r.u16() if qos else 0
        props = r.properties()
        if any(i == _TOPIC_ALIAS for i, _, _ in props) or not topic or "+" in topic or "#" in topic:
            raise _ProtocolError("bad topic (topic aliases are not supported)")
        msg = _Message(topic, r.rest(), qos, retain, _forwardable(props))
        self._route(msg, conn.session)
        if qos:
            conn.send(_packet(_PUBACK, 0, struct.pack("!H", pid)))

    def _puback_in(self, conn: _Connection, body: bytes) -> None:
        pid = _Reader(body).u16()
        with self._lock:
            session = conn.session
            if session is not None and session.conn is conn:
                session.inflight.pop(pid, None)
                self._pump(session)

    def _subscribe(self, conn: _Connection, body: bytes) -> None:
        r = _Reader(body)
        pid = r.u16()
        r.properties()
        codes = bytearray()
        with self._lock:
            session = conn.session
            assert session is not None
            new: list[tuple[str, int]] = []
            while r.pos < len(body):
                topic_filter, options = r.string(), r.byte()
                qos = min(options & 0x03, 1)
                sub = _Subscription(qos, bool(options & 0x04), bool(options & 0x08))
                existed = topic_filter in session.subs
                session.subs[topic_filter] = sub
                codes.append(qos)
                handling = (options >> 4) & 0x03
                if not topic_filter.startswith("$share/") and (
                    handling == 0 or (handling == 1 and not existed)
                ):
                    new.append((topic_filter, qos))
            conn.send(_packet(_SUBACK, 0, struct.pack("!H", pid) + _props() + bytes(codes)))
            for topic_filter, qos in new:
                for msg in list(self._retained.values()):
                    if _matches(topic_filter, msg.topic):
                        self._deliver(session, msg, min(qos, msg.qos), retain=True)

    def _unsubscribe(self, conn: _Connection, body: bytes) -> None:
        r = _Reader(body)
        pid = r.u16()
        r.properties()
        codes = bytearray()
        with self._lock:
            session = conn.session
            assert session is not None
            while r.pos < len(body):
                codes.append(0 if session.subs.pop(r.string(), None) else 0x11)
        conn.send(_packet(_UNSUBACK, 0, struct.pack("!H", pid) + _props() + bytes(codes)))

    def _disconnect_in(self, conn: _Connection, body: bytes) -> bool:
        reason = 0
        if body:
            r = _Reader(body)
            reason = r.byte()
            if r.pos < len(body):
                props = {i: v for i, _, v in r.properties()}
                if _SESSION_EXPIRY in props and conn.session is not None:
                    conn.session.expiry_s = int(props[_SESSION_EXPIRY])  # type: ignore[call-overload]
        return reason != 0x04  # 0x04: disconnect with will message

    def _closed(self, conn: _Connection, graceful: bool) -> None:
        conn.close()
        self._connections.discard(conn)
        with self._lock:
            session = conn.session
            if session is None or session.conn is not conn:
                will = None if graceful else conn.will
            else:
                session.conn = None
                if session.expiry_s == 0:
                    self._sessions.pop(session.client_id, None)
                will = None if graceful else conn.will
            if will is not None and not self._stop.is_set():
                self._route(will, None)

    # -- routing -------------------------------------------------------------------------------

    def _route(self, msg: _Message, sender: _Session | None) -> None:
        with self._lock:
            if msg.retain:
                if msg.payload:
                    self._retained[msg.topic] = msg
                else:
                    self._retained.pop(msg.topic, None)
            shared: dict[str, list[tuple[_Session, _Subscription]]] = {}
            for session in self._sessions.values():
                best: _Subscription | None = None
                for topic_filter, sub in session.subs.items():
                    if topic_filter.startswith("$share/"):
                        parts = topic_filter.split("/", 2)
                        if len(parts) == 3 and _matches(parts[2], msg.topic):
                            shared.setdefault(topic_filter, []).append((session, sub))
                        continue
                    if not _matches(topic_filter, msg.topic):
                        continue
                    if sub.no_local and session is sender:
                        continue
                    if best is None or sub.qos > best.qos:
                        best = sub
                if best is not None:
                    self._deliver(session, msg, min(best.qos, msg.qos),
                                  retain=msg.retain and best.retain_as_published)  # fmt: skip
            for key, members in shared.items():
                online = [m for m in members if m[0].conn is not None] or members
                turn = self._round_robin.get(key, 0)
                self._round_robin[key] = turn + 1
                session, sub = online[turn % len(online)]
                self._deliver(session, msg, min(sub.qos, msg.qos), retain=False)

    def _deliver(self, session: _Session, msg: _Message, qos: int, *, retain: bool) -> None:
        out = _Message(msg.topic, msg.payload, qos, retain, msg.properties)
        if qos == 0:
            if session.conn is not None:
                session.conn.send(self._publish_packet(out, 0, dup=False))
            return
        session.queue.append(out)
        self._pump(session)

    def _pump(self, session: _Session) -> None:
        conn = session.conn
        while conn is not None and session.queue and len(session.inflight) < session.receive_max:
            msg = session.queue.popleft()
            pid = session.next_id()
            session.inflight[pid] = msg
            conn.send(self._publish_packet(msg, pid, dup=False))

    @staticmethod
    def _publish_packet(msg: _Message, pid: int, *, dup: bool) -> bytes:
        flags = (0x08 if dup else 0) | (msg.qos << 1) | (1 if msg.retain else 0)
        body = _string(msg.topic) + (struct.pack("!H", pid) if msg.qos else b"")
        return _packet(_PUBLISH, flags, body + _props(msg.properties) + msg.payload)

    def __repr__(self) -> str:
        return f"EmbeddedBroker(port={self.port}, sessions={len(self._sessions)})"


def _forwardable(props: list[tuple[int, bytes, object]]) -> bytes:
    """A PUBLISH's properties as passed on to subscribers (without alias and subscription id)."""
    return b"".join(raw for i, raw, _ in props if i not in (_TOPIC_ALIAS, _SUBSCRIPTION_ID))
