"""Webhook signatures and sealed secrets."""

from __future__ import annotations

import hashlib

import pytest

from prognosis_service.alerts.signing import (
    SecretSealer,
    SignatureError,
    new_secret,
    sign,
    signature_header,
    verify,
)


def hmac_sha256_by_definition(key: bytes, msg: bytes) -> str:
    """HMAC as defined in RFC 2104 §2, written out with hashlib only."""
    block = 64
    if len(key) > block:
        key = hashlib.sha256(key).digest()
    key = key.ljust(block, b"\0")
    inner = hashlib.sha256(bytes(b ^ 0x36 for b in key) + msg).digest()
    return hashlib.sha256(bytes(b ^ 0x5C for b in key) + inner).hexdigest()


def test_reference_hmac_matches_rfc_4231_test_case_2() -> None:
    # RFC 4231 §4.3, test case 2: key "Jefe", data "what do ya want for nothing?"
    assert hmac_sha256_by_definition(b"Jefe", b"what do ya want for nothing?") == (
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
    )


def test_signature_is_hmac_sha256_over_id_timestamp_and_body() -> None:
    body = b'{"specversion":"1.0"}'
    expected = hmac_sha256_by_definition(b"whsec1_k", b"evt-1.1772344800." + body)
    assert sign("whsec1_k", "evt-1", 1772344800, body) == expected


def test_verify_accepts_any_listed_secret_and_refuses_tampering() -> None:
    body = b'{"a":1}'
    header = signature_header(["new-secret", "old-secret"], "evt-9", 1000, body)
    assert header.startswith("t=1000,v1=")
    assert header.count("v1=") == 2
    assert verify("old-secret", "evt-9", header, body, now=1010) == 1000
    assert verify("new-secret", "evt-9", header, body, now=1010) == 1000
    with pytest.raises(SignatureError, match="no v1 signature matches"):
        verify("other", "evt-9", header, body, now=1010)
    with pytest.raises(SignatureError, match="no v1 signature matches"):
        verify("new-secret", "evt-9", header, b'{"a":2}', now=1010)
    with pytest.raises(SignatureError, match="no v1 signature matches"):
        verify("new-secret", "evt-10", header, body, now=1010)
    with pytest.raises(SignatureError, match="more than 300 s"):
        verify("new-secret", "evt-9", header, body, now=1400)
    with pytest.raises(SignatureError, match="t=<unix>"):
        verify("new-secret", "evt-9", "v1=abc", body, now=1000)


def test_new_secret_is_32_random_bytes() -> None:
    a, b = new_secret(), new_secret()
    assert a != b
    assert a.startswith("whsec1_")
    assert len(a.removeprefix("whsec1_")) == 43  # 32 bytes in unpadded base64


def test_sealer_round_trip_and_refusals() -> None:
    sealer = SecretSealer(SecretSealer.generate_key())
    secret = new_secret()
    sealed = sealer.seal(secret)
    assert secret not in sealed
    assert sealer.seal(secret) != sealed  # fresh nonce each time
    assert sealer.open(sealed) == secret
    other = SecretSealer(SecretSealer.generate_key())
    with pytest.raises(ValueError, match="wrong key or tampered"):
        other.open(sealed)
    raw = bytearray(sealed.encode())
    raw[10] = ord("A") if raw[10] != ord("A") else ord("B")
    with pytest.raises(ValueError):
        sealer.open(raw.decode())
    assert "hidden" in repr(sealer)
    with pytest.raises(ValueError, match="at least 32 bytes"):
        SecretSealer(b"short")
