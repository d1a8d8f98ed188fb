"""The one error type of the contract: every failure to decode carries a storable reason."""

from __future__ import annotations

from enum import StrEnum

__all__ = ["DecodeError", "DecodeReason", "EncodeError"]


class DecodeReason(StrEnum):
    """Why a payload was refused. Values are stable: the service stores them in quarantine."""

    MALFORMED = "malformed"  # not the expected framing or syntax
    TRUNCATED = "truncated"  # ends before the frame does
    TRAILING_BYTES = "trailing_bytes"  # bytes left after a complete frame
    UNKNOWN_VERSION = "unknown_version"  # schema major version this code does not know
    UNKNOWN_KIND = "unknown_kind"  # frame kind this code does not know
    UNKNOWN_LAYOUT = "unknown_layout"  # indicator layout digest not known to the receiver
    LAYOUT_MISMATCH = "layout_mismatch"  # values do not fit the layout they reference
    NON_FINITE = "non_finite"  # NaN or infinity where a finite number is required
    INVALID = "invalid"  # well-formed but a field violates the contract
    OVERSIZED = "oversized"  # larger than the contract allows


class DecodeError(ValueError):
    """A payload could not be turned into a contract message.

    Attributes
    ----------
    reason : DecodeReason
        Machine-readable cause, safe to store and count.
    detail : str
        One human-readable line naming what was wrong.
    """

    def __init__(self, reason: DecodeReason, detail: str) -> None:
        super().__init__(f"{reason.value}: {detail}")
        self.reason = reason
        self.detail = detail


class EncodeError(ValueError):
    """A message cannot be represented on the wire (e.g. a value out of its encoding's range)."""
