"""Refuse webhook targets inside the service's own network (server-side request forgery guard).

A URL is checked when a subscription is registered and again before every delivery, because DNS
answers can change. Every address the host name resolves to must be a public (globally routable)
unicast address: loopback, link-local (including the 169.254.169.254 metadata address), private,
shared (100.64/10), multicast, unspecified, reserved and documentation ranges are refused, for IPv4
and IPv6, and an IPv6 address that embeds an IPv4 one (IPv4-mapped ``::ffff:a.b.c.d``, 6to4,
Teredo, NAT64 ``64:ff9b::/96``) is judged by the IPv4 address inside. The delivery then connects
to the checked address itself (see :meth:`ResolvedTarget.pinned_url`), so a second DNS lookup
cannot swap in another one.

On-premise dispatch systems live on private networks: ``allow_private_targets`` lifts the address
check, and ``allowed_networks`` lifts it for chosen networks only.
"""

from __future__ import annotations

import ipaddress
import socket
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from urllib.parse import urlsplit, urlunsplit

__all__ = [
    "ResolvedTarget",
    "TargetPolicy",
    "TargetRefusedError",
    "check_target",
    "system_resolver",
]

IPAddress = ipaddress.IPv4Address | ipaddress.IPv6Address
Resolver = Callable[[str, int], list[str]]

_NAT64 = ipaddress.ip_network("64:ff9b::/96")


class TargetRefusedError(ValueError):
    """A webhook URL is refused; ``reason`` is a short machine-readable code."""

    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(detail)
        self.reason = reason
        self.detail = detail


def system_resolver(host: str, port: int) -> list[str]:
    """Every address ``host`` resolves to (the operating system's resolver)."""
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except socket.gaierror as exc:
        raise TargetRefusedError("unresolvable", f"host {host!r} does not resolve: {exc}") from None
    return list(dict.fromkeys(str(info[4][0]) for info in infos))


@dataclass(frozen=True, slots=True, kw_only=True)
class TargetPolicy:
    """Which webhook targets are acceptable.

    Parameters
    ----------
    allow_private_targets : bool, default False
        Accept any resolved address (on-premise dispatch on a private network, tests).
    allowed_networks : sequence of str, default ()
        Networks (CIDR) accepted even though they are not public, e.g. ``("10.20.0.0/16",)``.
    allow_http : bool, default False
        Accept ``http`` URLs; otherwise ``https`` is required.
    allowed_ports : sequence of int or None, default None
        When given, only these ports are accepted.
    """

    allow_private_targets: bool = False
    allowed_networks: Sequence[str] = ()
    allow_http: bool = False
    allowed_ports: Sequence[int] | None = None
    resolver: Resolver = field(default=system_resolver, repr=False)

    def networks(self) -> list[ipaddress.IPv4Network | ipaddress.IPv6Network]:
        return [ipaddress.ip_network(n, strict=False) for n in self.allowed_networks]


@dataclass(frozen=True, slots=True)
class ResolvedTarget:
    """A checked URL and the address a delivery must connect to."""

    url: str
    scheme: str
    host: str
    port: int
    address: str

    def pinned_url(self) -> str:
        """The URL with the host replaced by the checked address (Host header and TLS SNI must
        carry :attr:`host`)."""
        parts = urlsplit(self.url)
        literal = f"[{self.address}]" if ":" in self.address else self.address
        netloc = f"{literal}:{self.port}"
        return urlunsplit((parts.scheme, netloc, parts.path or "/", parts.query, ""))

    @property
    def host_header(self) -> str:
        default = 443 if self.scheme == "https" else 80
        host = f"[{self.host}]" if ":" in self.host else self.host
        return host if self.port == default else f"{host}:{self.port}"


def _embedded_v4(ip: IPAddress) -> ipaddress.IPv4Address | None:
    if isinstance(ip, ipaddress.IPv4Address):
        return None
    if ip.ipv4_mapped is not None:
        return ip.ipv4_mapped
    if ip.sixtofour is not None:
        return ip.sixtofour
    if ip.teredo is not None:
        return ip.teredo[1]
    if ip in _NAT64:
        return ipaddress.IPv4Address(int(ip) & 0xFFFFFFFF)
    return None


def _category(ip: IPAddress) -> str | None:
    """Why ``ip`` is not a public unicast address, or None when it is."""
    inner = _embedded_v4(ip)
    if inner is not None:
        why = _category(inner)
        return None if why is None else f"{why} (embedded in {ip})"
    checks = (
        ("unspecified", ip.is_unspecified),
        ("loopback", ip.is_loopback),
        ("link-local", ip.is_link_local),
        ("multicast", ip.is_multicast),
        ("private", ip.is_private),
        ("reserved", ip.is_reserved),
    )
    for name, hit in checks:
        if hit:
            return name
    if not ip.is_global:
        return "not globally routable"
    return None


def check_target(url: str, policy: TargetPolicy) -> ResolvedTarget:
    """Check ``url`` against ``policy``; returns where to connect.

    Raises
    ------
    TargetRefusedError
        With ``reason`` one of ``bad_url``, ``scheme``, ``port``, ``unresolvable``,
        ``address``.
    """
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError as exc:
        raise TargetRefusedError("bad_url", f"url is not a valid URL: {exc}") from None
    schemes = ("https", "http") if policy.allow_http else ("https",)
    if parts.scheme not in schemes:
        raise TargetRefusedError(
            "scheme", f"url scheme must be one of {list(schemes)}, got {parts.scheme!r}"
        )
    host = parts.hostname
    if not host:
        raise TargetRefusedError("bad_url", f"url must name a host, got {url!r}")
    if parts.username or parts.password:
        raise TargetRefusedError("bad_url", "url must not carry credentials; use the signature")
    port = port or (443 if parts.scheme == "https" else 80)
    if policy.allowed_ports is not None and port not in policy.allowed_ports:
        raise TargetRefusedError(
            "port", f"url port must be one of {list(policy.allowed_ports)}, got {port}"
        )
    try:
        literal: IPAddress | None = ipaddress.ip_address(host)
    except ValueError:
        literal = None
    addresses = [str(literal)] if literal is not None else policy.resolver(host, port)
    if not addresses:
        raise TargetRefusedError("unresolvable", f"host {host!r} resolves to no address")
    allowed = policy.networks()
    for text in addresses:
        ip = ipaddress.ip_address(text.split("%", 1)[0])
        if policy.allow_private_targets or any(ip in net for net in allowed):
            continue
        why = _category(ip)
        if why is not None:
            raise TargetRefusedError(
                "address",
                f"url host {host!r} resolves to {ip}, a {why} address; refused "
                "(set allow_private_targets or allowed_networks for on-premise targets)",
            )
    return ResolvedTarget(url=url, scheme=parts.scheme, host=host, port=port, address=addresses[0])
