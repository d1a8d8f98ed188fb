"""Window sources: recording files, the drop folder, replay, and the simulator."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from scipy.io import wavfile

from edge_agent.agent import Agent
from edge_agent.outbox import Outbox
from edge_agent.sources import (
    DropFolderSource,
    ReplaySource,
    SimulatorSource,
    parse_recording_name,
    read_recording,
    recording_name,
    write_npy_recording,
)
from tests.brokers import MosquittoBroker
from tests.edge_agent.helpers import (
    FS_ACCEL,
    FS_PRESSURE,
    WINDOW_S,
    Receiver,
    gateway_config,
    small_asset,
    synthetic_window,
)

T0 = datetime(2026, 3, 1, 12, tzinfo=UTC)
ASSET = small_asset("TST-P1")
N_ACCEL = round(FS_ACCEL * WINDOW_S)
N_PRESSURE = round(FS_PRESSURE * WINDOW_S)


def test_names_round_trip() -> None:
    name = recording_name("MAL-P1", T0, ".csv")
    assert name == "MAL-P1_20260301T120000Z.csv"
    parsed = parse_recording_name(name)
    assert parsed is not None and parsed.asset_id == "MAL-P1" and parsed.start == T0
    assert parse_recording_name("MAL_P1_20260301T120000.5Z.npy").asset_id == "MAL_P1"  # type: ignore[union-attr]
    assert parse_recording_name("notes.txt") is None


def test_npy_csv_and_wav_recordings_read_into_window_sets(tmp_path: Path) -> None:
    ws = synthetic_window(ASSET, T0)
    path = write_npy_recording(tmp_path, ws, ASSET)
    back = read_recording(path, ASSET)
    assert back.start == T0
    np.testing.assert_array_equal(
        back.channels["de_accel"].samples, ws.channels["de_accel"].samples
    )
    assert len(back.channels["suction_pressure"].samples) == N_PRESSURE
    # CSV with a header naming a subset of the channels
    csv_path = tmp_path / recording_name("TST-P1", T0, ".csv")
    np.savetxt(csv_path, ws.channels["de_accel"].samples[:, None], delimiter=",",
               header="de_accel", comments="")  # fmt: skip
    assert set(read_recording(csv_path, ASSET).channels) == {"de_accel"}
    # 16-bit WAV at the accelerometer rate: full scale (32768) is 1 V times the sensitivity (g/V)
    wav_path = tmp_path / recording_name("TST-P1", T0, ".wav")
    pcm = np.round(ws.channels["de_accel"].samples * 32768).astype(np.int16)
    wavfile.write(wav_path, int(FS_ACCEL), pcm)
    got = read_recording(wav_path, ASSET).channels["de_accel"].samples
    np.testing.assert_allclose(got, ws.channels["de_accel"].samples, atol=0.5 / 32768 + 1e-12)


def _bad_files(folder: Path) -> dict[str, str]:
    """File name -> words its reason must contain."""
    t = T0
    files = {}
    short = folder / recording_name("TST-P1", t + timedelta(minutes=1), ".npy")
    np.save(short, np.zeros((100, 2)))
    files[short.name] = "expected 1280"
    garbage = folder / recording_name("TST-P1", t + timedelta(minutes=2), ".npy")
    garbage.write_bytes(b"\x93NUMPY but not really")
    files[garbage.name] = "not a readable .npy"
    words = folder / recording_name("TST-P1", t + timedelta(minutes=3), ".csv")
    words.write_text("de_accel\nhello\n")
    files[words.name] = "numeric"
    other = folder / recording_name("XYZ-P9", t, ".npy")
    np.save(other, np.zeros((N_ACCEL, 2)))
    files[other.name] = "not configured on this gateway"
    odd = folder / "readme.doc"
    odd.write_text("hello")
    files[odd.name] = "unsupported suffix"
    return files


def test_drop_folder_moves_good_files_to_done_and_bad_ones_to_failed(tmp_path: Path) -> None:
    drop = tmp_path / "drop"
    src = DropFolderSource(drop, [ASSET])
    good = [
        write_npy_recording(drop, synthetic_window(ASSET, T0 + timedelta(minutes=10 + i)), ASSET)
        for i in range(2)
    ]
    (drop / ".incoming.npy").write_bytes(b"half written")  # temporary names are left alone
    bad = _bad_files(drop)
    got = list(src.windows(ASSET, T0))
    assert [w.start for w in got] == [T0 + timedelta(minutes=10), T0 + timedelta(minutes=11)]
    assert list(src.windows(ASSET, T0)) == []  # picked up once
    src.settle(got[0], None)
    src.settle(got[1], "cannot compute indicators: boom")
    assert (drop / "done" / good[0].name).exists()
    assert (drop / "failed" / good[1].name).exists()
    assert "boom" in (drop / "failed" / f"{good[1].name}.reason.txt").read_text()
    for name, words in bad.items():
        assert (drop / "failed" / name).exists(), name
        reason = (drop / "failed" / f"{name}.reason.txt").read_text()
        assert words in reason and reason.count("\n") == 1, (name, reason)
    assert (drop / ".incoming.npy").exists()


def test_drop_folder_recovers_files_committed_before_a_crash(tmp_path: Path) -> None:
    drop = tmp_path / "drop"
    src = DropFolderSource(drop, [ASSET])
    path = write_npy_recording(drop, synthetic_window(ASSET, T0), ASSET)
    (ws,) = src.windows(ASSET, T0)
    marks = src.marks([ws])  # stored in the outbox with the window's message
    assert marks == [path.name]
    # crash before settle: the file is still in the drop folder; a new agent recovers it
    restarted = DropFolderSource(drop, [ASSET])
    restarted.recover(marks)
    assert (drop / "done" / path.name).exists()
    assert list(restarted.windows(ASSET, T0)) == []


@pytest.mark.broker
def test_agent_on_a_drop_folder_keeps_running_past_bad_files(
    tmp_path: Path, mosquitto: MosquittoBroker
) -> None:
    drop = tmp_path / "drop"
    drop.mkdir()
    bad = _bad_files(drop)
    for i in range(3):
        write_npy_recording(drop, synthetic_window(ASSET, T0 + timedelta(minutes=20 + i)), ASSET)
    cfg = gateway_config(tmp_path, mosquitto.url, assets=("TST-P1",),
                         source={"kind": "drop_folder", "folder": str(drop)})  # fmt: skip
    receiver = Receiver(mosquitto.host, mosquitto.port).start()
    summary = Agent(cfg.model_copy(update={"gateway_id": "gw-drop"}), max_windows=3).run()
    receiver.wait_for(
        lambda r: len([m for m in r.indicators() if m.gateway_id == "gw-drop"]) >= 3, 10
    )
    receiver.stop()
    assert summary.windows == 3 and summary.failed == 0
    assert len(list((drop / "done").iterdir())) == 3
    assert {p.name for p in (drop / "failed").iterdir() if not p.name.endswith(".txt")} == set(bad)
    starts = [m.window_start for m in receiver.indicators() if m.gateway_id == "gw-drop"]
    assert starts == [T0 + timedelta(minutes=20 + i) for i in range(3)]
    box = Outbox(cfg.outbox.path, gateway_id="gw-drop", site=cfg.site, max_bytes=10**9)
    last = recording_name("TST-P1", T0 + timedelta(minutes=22), ".npy")
    assert last in json.loads(box.meta("source_marks") or "[]")
    box.close()


def test_replay_paces_recordings_by_their_spacing(tmp_path: Path) -> None:
    for i in range(4):
        write_npy_recording(
            tmp_path, synthetic_window(ASSET, T0 + timedelta(minutes=10 * i)), ASSET
        )
    src = ReplaySource(tmp_path, [ASSET], pace=10.0)  # 10 recorded minutes per real minute
    due = datetime(2027, 1, 1, tzinfo=UTC)
    assert len(list(src.windows(ASSET, due))) == 1
    assert len(list(src.windows(ASSET, due + timedelta(seconds=30)))) == 0
    assert [w.start for w in src.windows(ASSET, due + timedelta(minutes=2))] == [
        T0 + timedelta(minutes=10),
        T0 + timedelta(minutes=20),
    ]
    assert ReplaySource(tmp_path, [ASSET], pace=0).remaining("TST-P1") == 4


def test_simulator_source_builds_scenarios_from_the_configuration() -> None:
    src = SimulatorSource([ASSET], scenarios={"TST-P1": "outer_race:1:30"}, start=T0, seed=3)
    (ws,) = src.windows(ASSET, T0 + timedelta(days=2))
    assert ws.asset_id == "TST-P1" and set(ws.channels) == {"de_accel", "suction_pressure"}
    assert ws.labels  # the simulator tells the truth about the window
    with pytest.raises(ValueError, match="scenario must be"):
        SimulatorSource([ASSET], scenarios={"TST-P1": "broken"}, start=T0)
