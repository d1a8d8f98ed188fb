"""Recordings on disk and the asset configuration as TOML: round trips and clear errors."""

from __future__ import annotations

import json
import tomllib
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from edge_agent.simulator import (
    ASSET_FILE,
    LABELS_FILE,
    SALTBUSH_ASSET_IDS,
    FaultScenario,
    PumpSimulator,
    RecordingFormat,
    RecordingFormatError,
    SensorFaultEvent,
    asset_from_toml,
    asset_to_toml,
    read_asset_toml,
    read_recordings,
    record_simulation,
    saltbush_asset,
    write_recording,
)

T0 = datetime(2026, 3, 2, 8, 30, tzinfo=UTC)


@pytest.mark.parametrize("asset_id", SALTBUSH_ASSET_IDS)
def test_asset_toml_round_trip(asset_id: str) -> None:
    asset = saltbush_asset(asset_id)
    text = asset_to_toml(asset)
    assert tomllib.loads(text)["asset_id"] == asset_id  # valid TOML for the standard parser
    assert asset_from_toml(text) == asset


def test_asset_toml_errors_name_the_source_and_key(tmp_path: Path) -> None:
    text = asset_to_toml(saltbush_asset("MAL-P1"))
    with pytest.raises(RecordingFormatError, match=r"a\.toml: invalid TOML.*line"):
        asset_from_toml(text.replace("vane_count = 6", "vane_count = = 6"), source="a.toml")
    with pytest.raises(RecordingFormatError, match="key colour"):
        asset_from_toml('colour = "red"\n' + text, source="a.toml")
    with pytest.raises(RecordingFormatError, match="key vane_count"):
        asset_from_toml(text.replace("vane_count = 6", "vane_count = 0"))
    with pytest.raises(FileNotFoundError, match="asset file not found"):
        read_asset_toml(tmp_path / "missing.toml")


@pytest.mark.parametrize("fmt", ["npy", "csv"])
def test_recordings_round_trip(tmp_path: Path, fmt: RecordingFormat) -> None:
    asset = saltbush_asset("COO-P3")
    event = SensorFaultEvent(
        channel="discharge_pressure", kind="dropout", start=T0, end=T0 + timedelta(hours=1)
    )
    sim = PumpSimulator(asset, FaultScenario(sensor_faults=(event,)), seed=6)
    count = record_simulation(
        sim, tmp_path, start=T0, end=T0 + timedelta(hours=2), interval=timedelta(hours=1), fmt=fmt
    )
    assert count == 2
    assert read_asset_toml(tmp_path / ASSET_FILE) == asset
    back = list(read_recordings(tmp_path))
    assert [ws.start for ws in back] == [T0, T0 + timedelta(hours=1)]
    for ws in back:
        original = sim.window(ws.start)
        assert ws.asset_id == "COO-P3"
        assert ws.labels == original.labels  # JSON keeps floats exactly (shortest repr)
        assert ws.process == original.process
        assert list(ws.channels) == list(original.channels)
        for name, w in ws.channels.items():
            o = original.channels[name]
            assert (w.kind, w.unit, w.fs) == (o.kind, o.unit, o.fs)
            if fmt == "npy":
                assert np.array_equal(w.samples, o.samples, equal_nan=True)
            else:
                assert np.allclose(w.samples, o.samples, rtol=1e-9, atol=1e-12, equal_nan=True)
    assert np.isnan(back[0].channels["discharge_pressure"].samples).any()  # dropout kept


def test_files_are_grouped_by_rate_and_listed_in_labels(tmp_path: Path) -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=1)
    entry = write_recording(tmp_path, sim.window(T0))
    assert entry["recording"] == "MAL-P1_20260302T083000Z"
    files = {f["file"]: f["channels"] for f in entry["files"]}
    assert files == {
        "MAL-P1_20260302T083000Z_25600hz.npy": ["de_accel", "nde_accel"],
        "MAL-P1_20260302T083000Z_1000hz.npy": [
            "discharge_pressure", "suction_pressure", "motor_current",
        ],
        "MAL-P1_20260302T083000Z_10hz.npy": ["bearing_temp"],
    }  # fmt: skip
    assert np.load(tmp_path / "MAL-P1_20260302T083000Z_25600hz.npy").shape == (25_600, 2)
    line = json.loads((tmp_path / LABELS_FILE).read_text().splitlines()[0])
    assert line["start"] == "2026-03-02T08:30:00Z"
    assert line["labels"]["fault"] == "healthy"


def test_csv_has_a_header_row_of_channel_names(tmp_path: Path) -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=1)
    write_recording(tmp_path, sim.window(T0), fmt="csv")
    header = (tmp_path / "MAL-P1_20260302T083000Z_1000hz.csv").read_text().splitlines()[0]
    assert header == "discharge_pressure,suction_pressure,motor_current"


def test_recording_refuses_to_overwrite_and_bad_format(tmp_path: Path) -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=1)
    ws = sim.window(T0)
    write_recording(tmp_path, ws)
    with pytest.raises(FileExistsError, match="not overwriting"):
        write_recording(tmp_path, ws)
    with pytest.raises(ValueError, match="fmt must be one of"):
        write_recording(tmp_path, ws, fmt="parquet")  # type: ignore[arg-type]


def test_record_simulation_refuses_a_folder_of_another_asset(tmp_path: Path) -> None:
    one = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=1)
    other = PumpSimulator(saltbush_asset("MAL-P2"), FaultScenario(), seed=1)
    record_simulation(one, tmp_path, start=T0, end=T0 + timedelta(seconds=1),
                      interval=timedelta(seconds=1))  # fmt: skip
    with pytest.raises(ValueError, match="use a new folder"):
        record_simulation(other, tmp_path, start=T0, end=T0 + timedelta(seconds=1),
                          interval=timedelta(seconds=1))  # fmt: skip


def test_reader_reports_missing_files_and_bad_lines(tmp_path: Path) -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=1)
    record_simulation(sim, tmp_path, start=T0, end=T0 + timedelta(seconds=1),
                      interval=timedelta(seconds=1))  # fmt: skip
    (tmp_path / "MAL-P1_20260302T083000Z_10hz.npy").unlink()
    with pytest.raises(RecordingFormatError, match=r"_10hz\.npy: recording file listed"):
        list(read_recordings(tmp_path))
    (tmp_path / LABELS_FILE).write_text("{not json\n")
    with pytest.raises(RecordingFormatError, match=r"labels.jsonl:1: not a recording entry"):
        list(read_recordings(tmp_path))


def test_reader_reports_a_corrupt_table(tmp_path: Path) -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=1)
    record_simulation(sim, tmp_path, start=T0, end=T0 + timedelta(seconds=1),
                      interval=timedelta(seconds=1), fmt="csv")  # fmt: skip
    target = tmp_path / "MAL-P1_20260302T083000Z_10hz.csv"
    target.write_text("bearing_temp\n31.2\nwarm\n")
    with pytest.raises(RecordingFormatError, match=r"_10hz\.csv: not a readable \.csv table"):
        list(read_recordings(tmp_path))
    target.write_text("motor_current\n1.0\n")
    with pytest.raises(RecordingFormatError, match="does not match the channels"):
        list(read_recordings(tmp_path))
