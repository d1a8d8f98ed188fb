"""``POST /v1/indicators`` parses its body with msgspec where msgspec decodes it and with json
where it does not; the two must be one parser to the caller.

Checked against Python's own ``json.loads`` (the reference here, as before the fast path):
equal results of equal types for every document the fast decoder takes, json's own decision and
wording for everything it refuses (NaN and Infinity tokens, numbers that overflow to infinity,
lone surrogates, a BOM, UTF-16, syntax errors), integers beyond 64 bits kept exact, and the same
stored, duplicate and quarantine outcome, reason and raw payload through the service either way.
"""

from __future__ import annotations

import gc
import json
import math
import re
from typing import Any

import msgspec
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import select

from prognosis_service.domain import http_ingest
from prognosis_service.domain.http_ingest import gc_paused, loads
from prognosis_service.store.models import QuarantineRow
from shared_schema import to_readable
from tests.prognosis_service import factories as f
from tests.prognosis_service.conftest import Service
from tests.prognosis_service.test_api import register


def _same(a: Any, b: Any) -> bool:
    """Equal values of the very same types all the way down (NaN equal to NaN, -0.0 not 0)."""
    if type(a) is not type(b):
        return False
    if isinstance(a, float):
        return repr(a) == repr(b)
    if isinstance(a, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, dict):
        return list(a) == list(b) and all(_same(a[k], b[k]) for k in a)
    return bool(a == b)


def _outcome(parse: Any, body: bytes) -> tuple[str, Any]:
    try:
        return "ok", parse(body)
    except (ValueError, RecursionError) as exc:
        return type(exc).__name__, str(exc)


def _fast_takes(body: bytes) -> bool:
    try:
        msgspec.json.decode(body)
    except (msgspec.MsgspecError, RecursionError):
        return False
    return True


# (body, whether the fast decoder takes it): both paths must be exercised.
_CASES = [
    (b'{"messages": [{"sequence": 3, "value": 1.5}]}', True),
    (b"18446744073709551615", True),  # 2**64 - 1
    (b"18446744073709551616", True),  # 2**64: exact int, not a float as orjson makes it
    (b"-9223372036854775809", True),  # -(2**63) - 1
    (b"123456789012345678901234567890", True),
    (b"[-0, -0.0, 0.1e1, 1E+2, 5e-324, 1e-400, 1.7976931348623157e308]", True),
    (b'{"a": 1, "a": 2}', True),  # the last of a repeated key, as json keeps it
    (b'"\\u00e9\\n\\u0000"', True),
    (b"[NaN]", False),
    (b"[Infinity, -Infinity]", False),
    (b"[1e400]", False),  # json makes it inf: a message to quarantine as non-finite
    (b"[-1.7976931348623159e308]", False),
    (b'"\\ud800"', False),  # a lone surrogate, which json accepts
    (b'"\xed\xa0\x80"', False),
    (b"\xef\xbb\xbf[1]", False),  # UTF-8 BOM
    ("[1]".encode("utf-16-le"), False),
    (b"[1,]", False),
    (b"[1] x", False),
    (b"\xff\xfe", False),
    (b"", False),
    (b'"\x01"', False),
    (b"[" * 100_000, False),
]


@pytest.mark.parametrize(("body", "fast"), _CASES, ids=[repr(c[0][:40]) for c in _CASES])
def test_loads_decides_as_json_does(body: bytes, fast: bool) -> None:
    assert _fast_takes(body) is fast
    want, got = _outcome(json.loads, body), _outcome(loads, body)
    assert want[0] == got[0]
    if want[0] == "ok":
        assert _same(want[1], got[1])
    else:
        assert want[1] == got[1]  # json's own words, whichever path refused


def test_integers_beyond_64_bits_stay_exact() -> None:
    big = 2**70 + 1
    doc = loads(json.dumps({"sequence": big, "value": -big}).encode())
    assert doc == {"sequence": big, "value": -big}
    assert type(doc["sequence"]) is int


_JSON_VALUES = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(min_value=-(2**80), max_value=2**80)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(st.characters(codec="utf-8") | st.sampled_from(["\ud800", "\udfff"]), max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=4), inner),
    max_leaves=20,
)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(doc=_JSON_VALUES, indent=st.sampled_from([None, 1]))
def test_loads_equals_json_on_any_document(doc: Any, indent: int | None) -> None:
    body = json.dumps(doc, allow_nan=True, indent=indent).encode("utf-8", "surrogatepass")
    assert _same(loads(body), json.loads(body))


@settings(max_examples=200, deadline=None)
@given(text=st.text(st.sampled_from('[]{}",:0123456789.eE+-tfnaINy \\u'), max_size=30))
def test_loads_equals_json_on_near_json_text(text: str) -> None:
    body = text.encode()
    want, got = _outcome(json.loads, body), _outcome(loads, body)
    assert want[0] == got[0]
    assert _same(want[1], got[1]) if want[0] == "ok" else want[1] == got[1]


def _hostile_batch() -> bytes:
    """Good messages and ones the contract refuses for what json makes of their numbers."""
    msgs = [to_readable(f.message(i), f.LAYOUT) for i in range(1, 6)]
    text = json.dumps({"layouts": [f.LAYOUT.model_dump(mode="json")], "messages": msgs})
    # Message by message, the first value becomes a token: indices 1..4 refused, 0 stored.
    for i, token in enumerate(["NaN", "1e400", str(2**130), "-Infinity"], start=1):
        head, sep, tail = text.partition(f'"sequence": {i + 1},')
        tail, n = re.subn(r'"value": -?[0-9][0-9.eE+-]*', f'"value": {token}', tail, count=1)
        assert sep and n == 1
        text = head + sep + tail
    doc = json.loads(text)
    doc["messages"].append({**doc["messages"][0], "sequence": 2**64})  # beyond the contract
    return json.dumps(doc).encode()


def test_the_service_stores_and_quarantines_alike_on_either_path(
    service: Service, monkeypatch: pytest.MonkeyPatch
) -> None:
    register(service)
    headers = {**service.auth(service.keys.ingest), "content-type": "application/json"}
    body = _hostile_batch()
    assert not _fast_takes(body)  # NaN: the whole body goes to json
    good = json.loads(body)
    good["messages"] = [good["messages"][i] for i in (0, 3, 5)]  # no token only json reads
    good_body = json.dumps(good).encode()
    assert _fast_takes(good_body)

    def post(content: bytes) -> dict[str, Any]:
        resp = service.client.post("/v1/indicators", content=content, headers=headers)
        assert resp.status_code == 200, resp.text
        return dict(resp.json())

    with monkeypatch.context() as m:
        m.setattr(http_ingest, "loads", json.loads)  # the parser as it was
        m.setattr(http_ingest, "_parse_typed", lambda _body: None)  # no struct decoding
        before = [post(body), post(good_body)]
    after = [post(body), post(good_body)]

    assert before[0]["stored"] == 1 and before[1]["stored"] == 0, before
    assert [q["reason"] for q in before[0]["quarantined"]] == [
        "non_finite",
        "non_finite",
        "invalid",  # 2**130 as a value: beyond any float32
        "non_finite",
        "invalid",  # sequence 2**64
    ]
    for b, a in zip(before, after, strict=True):
        assert a["quarantined"] == b["quarantined"]
        assert a["received"] == b["received"]
        assert a["stored"] == 0 and a["duplicates"] == b["stored"] + b["duplicates"]
    with service.store.read() as s:
        rows = s.scalars(select(QuarantineRow)).all()
    # One raw payload per refused message on either path: each fingerprint counted once a post
    # (the 2**130 value and the 2**64 sequence are in both bodies, the others in the first).
    assert sorted((r.attempts, r.reason) for r in rows) == [
        (2, "non_finite"),
        (2, "non_finite"),
        (2, "non_finite"),
        (4, "invalid"),
        (4, "invalid"),
    ]


def test_gc_paused_switches_the_collector_back_on() -> None:
    assert gc.isenabled()
    with gc_paused():
        assert not gc.isenabled()
        with gc_paused():  # a second request in another thread meanwhile
            assert not gc.isenabled()
        assert not gc.isenabled()
    assert gc.isenabled()
    with pytest.raises(RuntimeError), gc_paused():
        raise RuntimeError("a refused batch")
    assert gc.isenabled()


def test_gc_paused_leaves_a_collector_switched_off_by_the_host_off() -> None:
    gc.disable()
    try:
        with gc_paused():
            pass
        assert not gc.isenabled()
    finally:
        gc.enable()


def test_a_request_leaves_the_collector_on(service: Service) -> None:
    register(service)
    headers = {**service.auth(service.keys.ingest), "content-type": "application/json"}
    for content in (b'{"messages": 5}', json.dumps([to_readable(f.message(1), f.LAYOUT)]).encode()):
        service.client.post("/v1/indicators", content=content, headers=headers)
        assert gc.isenabled()


def test_non_finite_survives_as_json_reads_it() -> None:
    assert math.isnan(loads(b"[NaN]")[0]) and loads(b"[1e400]") == [math.inf]
