"""Coverage-guided fuzzing (atheris, a libFuzzer engine for Python) of the codec and ingest.

    ./dev fuzz                            # until stopped (Ctrl-C); corpus kept in .fuzz-corpus/
    ./dev fuzz -max_total_time=600        # ten minutes
    .venv/bin/python -m tests.fuzz.ingest_target -runs=20000 -seed=1   # what CI runs

Each input's first byte picks what the rest is: a binary indicator frame (or batch), the readable
JSON form, or any payload on one of the service's topics handed to the ingest pipeline with a
real SQLite store. Seed inputs are valid messages of each kind; libFuzzer mutates them, keeping
what reaches new code. A crash is any exception other than the codec's ``DecodeError``, a
decoded frame that does not re-encode to the same message, or a pipeline batch whose message
neither was stored, nor was a duplicate, nor was quarantined, nor was counted as another kind
(silent loss). Extra arguments are libFuzzer's (``-help=1`` lists them).
"""

from __future__ import annotations

import json
import sys
import tempfile
from collections.abc import Callable
from datetime import timedelta
from pathlib import Path

import atheris

with atheris.instrument_imports(include=["shared_schema", "prognosis_service.ingest"]):
    from prognosis_service.domain.assets import AssetSpec, register_asset
    from prognosis_service.ingest.pipeline import Inbound, Pipeline
    from prognosis_service.store.engine import Store
    from prognosis_service.store.migrate import upgrade
    from shared_schema import (
        DecodeError,
        alarm_topic,
        decode_indicators,
        dropped_topic,
        encode_batch,
        encode_indicators,
        from_readable,
        indicators_topic,
        split_batch,
        status_topic,
        to_readable,
    )
    from tests.prognosis_service import factories as f

LAYOUTS = {f.LAYOUT.digest: f.LAYOUT, f.LAYOUT_B.digest: f.LAYOUT_B}
TOPICS = (
    f.topic(),
    f.topic(asset_id="MAL-P9"),  # not registered
    f.announcement_topic(),
    status_topic(f.SITE, f.GATEWAY),
    dropped_topic(f.SITE, f.GATEWAY),
    alarm_topic(f.SITE, f.GATEWAY, f.ASSET),
    indicators_topic("elsewhere", "gw-x", f.ASSET),  # another site's asset
    "wellspan/not/a/topic",
)
IDENTITY = {"site": f.SITE, "gateway_id": f.GATEWAY, "asset_id": f.ASSET}


class Harness:
    """The store and pipeline shared by every input of one fuzzing process."""

    def __init__(self, folder: Path) -> None:
        url = f"sqlite:///{folder / 'fuzz.db'}"
        upgrade(url)
        self.store = Store(url)
        self.pipeline = Pipeline(clock=lambda: f.T0 + timedelta(hours=1))
        with self.store.write() as s:
            register_asset(s, self.pipeline, AssetSpec(asset_id=f.ASSET, site=f.SITE))
            self.pipeline.handle(s, [Inbound(f.announcement_topic(), f.announcement(), f.T0)])

    def codec(self, payload: bytes) -> None:
        try:
            frames = split_batch(payload)
        except DecodeError:
            return
        for frame in frames:
            try:
                msg = decode_indicators(frame, LAYOUTS, **IDENTITY)
            except DecodeError:
                continue
            layout = LAYOUTS[msg.layout_digest]
            again = decode_indicators(encode_indicators(msg, layout), LAYOUTS, **IDENTITY)
            if again != msg:
                raise AssertionError(f"re-encoding changed the message: {msg!r} -> {again!r}")

    def readable(self, payload: bytes) -> None:
        try:
            msg = from_readable(payload, LAYOUTS)
        except DecodeError:
            return
        again = from_readable(to_readable(msg, LAYOUTS[msg.layout_digest]), LAYOUTS)
        if again != msg:
            raise AssertionError(f"the readable form changed the message: {msg!r} -> {again!r}")

    def ingest(self, topic: str, payload: bytes) -> None:
        with self.store.write() as s:
            out = self.pipeline.handle(s, [Inbound(topic, payload, f.T0)])
        accounted = out.stored + out.duplicates + len(out.quarantined) + sum(out.other.values())
        if accounted < 1:
            raise AssertionError(f"a message vanished: topic {topic!r}, outcome {out!r}")


def seeds() -> list[bytes]:
    """Valid inputs of every kind, each behind the byte that selects its handler."""
    msgs = [f.message(i) for i in range(3)]
    frames = [f.frame(m) for m in msgs]
    body = json.dumps(to_readable(msgs[0], f.LAYOUT)).encode()
    out = [bytes([0]) + frames[0], bytes([0]) + encode_batch(frames), bytes([1]) + body]
    for k, _ in enumerate(TOPICS):
        out.append(bytes([2 + k]) + frames[1])
    out.append(bytes([2]) + encode_batch(frames))
    out.append(bytes([4]) + f.status(f.GatewayState.ONLINE, f.T0)[1])
    out.append(bytes([3]) + f.announcement())
    return out


def target(harness: Harness) -> Callable[[bytes], None]:
    def one_input(data: bytes) -> None:
        if not data:
            return
        kind, payload = data[0] % (2 + len(TOPICS)), data[1:]
        if kind == 0:
            harness.codec(payload)
        elif kind == 1:
            harness.readable(payload)
        else:
            harness.ingest(TOPICS[kind - 2], payload)

    return one_input


def main(argv: list[str]) -> None:
    with tempfile.TemporaryDirectory(prefix="wellspan-fuzz-") as tmp:
        folder = Path(tmp)
        harness = Harness(folder)
        # the seeds go last: libFuzzer reads every corpus folder and writes new inputs into
        # the first, the caller's when one is given
        corpus = folder / "seeds"
        corpus.mkdir()
        for i, seed in enumerate(seeds()):
            (corpus / f"seed-{i:02d}").write_bytes(seed)
        atheris.Setup([*argv, str(corpus)], target(harness))
        atheris.Fuzz()


if __name__ == "__main__":
    main(sys.argv)
