"""Webhook signatures (HMAC-SHA256) and the sealing of subscription secrets at rest.

Signature
---------
The sender computes ``HMAC-SHA256(secret, f"{event_id}.{t}.".encode() + body)`` where ``t`` is the
Unix time of signing in whole seconds and ``body`` the exact request bytes, and sends::

    Wellspan-Event-Id: <event id>
    Wellspan-Signature: t=<unix seconds>,v1=<64 hex digits>[,v1=<hex>...]

Several ``v1`` entries appear while a rotated secret's previous value is still honoured; a receiver
accepts the request when any of them matches its secret. Receivers refuse timestamps more than a
tolerance (default 300 s) away from their clock, which bounds replays; they de-duplicate by the
event id, which makes redeliveries harmless.

Secrets at rest
---------------
A subscription secret must stay usable for signing, so it cannot be hashed. It is *sealed* with a
service key kept outside the database (see :class:`SecretSealer`): a database dump alone does not
yield the secrets. The seal is encrypt-then-MAC from HMAC-SHA256 alone (standard library): a
keystream ``HMAC(k_enc, nonce ‖ counter)`` XORed with the secret, then a tag
``HMAC(k_mac, "v1" ‖ nonce ‖ ciphertext)``; the two keys are derived from the service key by HMAC
with distinct labels. The plain secret is returned to the caller exactly once, at creation or
rotation.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import secrets
from collections.abc import Sequence
from dataclasses import dataclass

__all__ = [
    "EVENT_ID_HEADER",
    "SIGNATURE_HEADER",
    "SecretSealer",
    "SignatureError",
    "new_secret",
    "sign",
    "signature_header",
    "verify",
]

EVENT_ID_HEADER = "Wellspan-Event-Id"
SIGNATURE_HEADER = "Wellspan-Signature"
SECRET_BYTES = 32
DEFAULT_TOLERANCE_S = 300


class SignatureError(ValueError):
    """A webhook request's signature is missing, malformed, stale or does not match."""


def new_secret() -> str:
    """A fresh subscription secret: 32 random bytes, URL-safe base64 without padding."""
    return "whsec1_" + base64.urlsafe_b64encode(secrets.token_bytes(SECRET_BYTES)).decode().rstrip(
        "="
    )


def sign(secret: str, event_id: str, timestamp: int, body: bytes) -> str:
    """Hex HMAC-SHA256 of ``f"{event_id}.{timestamp}."`` followed by ``body``."""
    msg = f"{event_id}.{int(timestamp)}.".encode() + body
    return hmac.new(secret.encode(), msg, hashlib.sha256).hexdigest()


def signature_header(secrets_: Sequence[str], event_id: str, timestamp: int, body: bytes) -> str:
    """The ``Wellspan-Signature`` value, one ``v1`` entry per secret (newest first)."""
    if not secrets_:
        raise ValueError("secrets_ must hold at least one secret, got none")
    parts = [f"t={int(timestamp)}"] + [f"v1={sign(s, event_id, timestamp, body)}" for s in secrets_]
    return ",".join(parts)


def verify(
    secret: str,
    event_id: str,
    header: str,
    body: bytes,
    *,
    now: float,
    tolerance_s: float = DEFAULT_TOLERANCE_S,
) -> int:
    """Check a ``Wellspan-Signature`` header; returns its timestamp.

    Raises
    ------
    SignatureError
        When the header is malformed, its timestamp is outside ``tolerance_s`` of ``now``, or no
        ``v1`` entry matches.
    """
    timestamp: int | None = None
    candidates: list[str] = []
    for item in header.split(","):
        name, sep, value = item.strip().partition("=")
        if not sep:
            raise SignatureError(f"signature header entry must be name=value, got {item!r}")
        if name == "t":
            try:
                timestamp = int(value)
            except ValueError:
                raise SignatureError(f"t must be whole Unix seconds, got {value!r}") from None
        elif name == "v1":
            candidates.append(value)
    if timestamp is None or not candidates:
        raise SignatureError("signature header must carry t=<unix> and at least one v1=<hex>")
    if abs(now - timestamp) > tolerance_s:
        raise SignatureError(
            f"signature timestamp {timestamp} is more than {tolerance_s:g} s from now ({now:.0f})"
        )
    expected = sign(secret, event_id, timestamp, body)
    if not any(hmac.compare_digest(expected, c) for c in candidates):
        raise SignatureError("no v1 signature matches")
    return timestamp


@dataclass(frozen=True, slots=True)
class SecretSealer:
    """Seal and open subscription secrets with a service key held outside the database.

    Parameters
    ----------
    key : bytes
        At least 32 bytes, e.g. from :meth:`generate_key`, kept in the service's secret store.
    """

    key: bytes

    def __post_init__(self) -> None:
        if len(self.key) < 32:
            raise ValueError(f"key must be at least 32 bytes, got {len(self.key)}")

    def __repr__(self) -> str:
        return "SecretSealer(key=<hidden>)"

    @staticmethod
    def generate_key() -> bytes:
        return secrets.token_bytes(32)

    @classmethod
    def from_text(cls, text: str) -> SecretSealer:
        """From the URL-safe base64 text of a key (as kept in an environment variable)."""
        try:
            key = base64.urlsafe_b64decode(text + "=" * (-len(text) % 4))
        except (ValueError, TypeError):
            raise ValueError("seal key must be URL-safe base64 text") from None
        return cls(key)

    def _subkey(self, label: bytes) -> bytes:
        return hmac.new(self.key, b"wellspan-webhook-seal:" + label, hashlib.sha256).digest()

    def _stream(self, nonce: bytes, n: int) -> bytes:
        k = self._subkey(b"enc")
        out = b"".join(
            hmac.new(k, nonce + i.to_bytes(4, "big"), hashlib.sha256).digest()
            for i in range((n + 31) // 32)
        )
        return out[:n]

    def seal(self, secret: str) -> str:
        """``v1:`` + base64(nonce ‖ ciphertext ‖ tag)."""
        plain = secret.encode()
        nonce = secrets.token_bytes(16)
        ct = bytes(a ^ b for a, b in zip(plain, self._stream(nonce, len(plain)), strict=True))
        tag = hmac.new(self._subkey(b"mac"), b"v1" + nonce + ct, hashlib.sha256).digest()
        return "v1:" + base64.urlsafe_b64encode(nonce + ct + tag).decode()

    def open(self, sealed: str) -> str:
        """The secret inside ``sealed``; ValueError when it was not sealed with this key."""
        version, _, payload = sealed.partition(":")
        if version != "v1":
            raise ValueError(f"sealed secret version must be 'v1', got {version!r}")
        raw = base64.urlsafe_b64decode(payload)
        if len(raw) < 48:
            raise ValueError("sealed secret is truncated")
        nonce, ct, tag = raw[:16], raw[16:-32], raw[-32:]
        expected = hmac.new(self._subkey(b"mac"), b"v1" + nonce + ct, hashlib.sha256).digest()
        if not hmac.compare_digest(tag, expected):
            raise ValueError("sealed secret does not open with this key (wrong key or tampered)")
        return bytes(a ^ b for a, b in zip(ct, self._stream(nonce, len(ct)), strict=True)).decode()
