"""Gateway configuration: the sample validates; bad files give one line naming file, key, line."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from edge_agent.config import ConfigError, load_config
from tests.edge_agent.helpers import asset_toml
from wellspan.cli import main

SAMPLE = Path(__file__).resolve().parents[2] / "deploy" / "gateways" / "mallee.toml"

HEAD = """gateway_id = "gw-test"
site = "test-site"

[broker]
url = "mqtt://127.0.0.1:1883"
keepalive_s = 30

[schedule]
interval_s = 60
"""


def write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "gw.toml"
    p.write_text(text)
    return p


def line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if needle in line)


def test_sample_config_validates_and_names_the_mallee_pumps() -> None:
    cfg = load_config(SAMPLE)
    assert cfg.gateway_id == "gw-mallee"
    assert cfg.site == "saltbush-flats"
    assert [a.asset_id for a in cfg.assets] == ["MAL-P1", "MAL-P2", "MAL-P3"]
    assert [c.name for c in cfg.assets[0].channels][:2] == ["de_accel", "nde_accel"]
    assert cfg.assets[0].bearings["de"].n_elements == 8
    assert cfg.outbox.path.is_absolute()  # relative paths are resolved against the file's folder


def test_minimal_config_gets_defaults(tmp_path: Path) -> None:
    cfg = load_config(write(tmp_path, HEAD + asset_toml("TST-P1")))
    assert cfg.client_id == "wellspan-gw-test"
    assert cfg.budget.heartbeat_s == 3600
    assert cfg.outbox.path == tmp_path / "outbox.sqlite"


@pytest.mark.parametrize(
    ("edit", "needle", "key", "words"),
    [
        # unknown key in a table
        (lambda t: t.replace("keepalive_s = 30", "keepalive_s = 30\nkeep_alive = 5"),
         "keep_alive = 5", "broker.keep_alive", "unknown key"),
        # unknown key inside the second channel of an asset
        (lambda t: t.replace('fs_hz = 500.0', 'fs_hz = 500.0\ngain = 2'),
         "gain = 2", "assets[0].channels[1].gain", "unknown key"),
        # wrong type
        (lambda t: t.replace("interval_s = 60", 'interval_s = "often"'),
         'interval_s = "often"', "schedule.interval_s", "valid number"),
        # out of range, deep in an array of tables
        (lambda t: t.replace("fs_hz = 500.0", "fs_hz = -5"),
         "fs_hz = -5", "assets[0].channels[1].fs_hz", "greater than 0"),
        # bad bearing geometry: the rolling element is larger than the pitch circle
        (lambda t: t.replace("element_diameter_mm = 15.0", "element_diameter_mm = 90.0"),
         "[assets.bearings.de]", "assets[0].bearings.de", "smaller than pitch_diameter_mm"),
        # a bad broker URL
        (lambda t: t.replace("mqtt://127.0.0.1:1883", "http://broker"),
         "http://broker", "broker.url", "mqtt://"),
    ],
)  # fmt: skip
def test_bad_value_names_file_line_and_key(
    tmp_path: Path, edit: object, needle: str, key: str, words: str
) -> None:
    text = edit(HEAD + asset_toml("TST-P1"))  # type: ignore[operator]
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"{path}:{line_of(text, needle)}: {key}: ")
    assert words in msg


def test_missing_key_names_its_table(tmp_path: Path) -> None:
    text = HEAD + asset_toml("TST-P1").replace('kind = "pressure"\n', "")
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    # the second [[assets.channels]] header is where the key is missing
    second_channel = [
        i for i, ln in enumerate(text.splitlines(), 1) if ln == "[[assets.channels]]"
    ][1]
    assert str(info.value).startswith(f"{path}:{second_channel}: assets[0].channels[1].kind: ")
    assert "required key is missing" in str(info.value)


def test_missing_top_level_key_and_no_assets(tmp_path: Path) -> None:
    path = write(tmp_path, HEAD.replace('site = "test-site"\n', "") + asset_toml("TST-P1"))
    with pytest.raises(ConfigError, match=r"site: required key is missing"):
        load_config(path)


def test_invalid_toml_names_the_line(tmp_path: Path) -> None:
    text = HEAD + "broken = = 3\n" + asset_toml("TST-P1")
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert str(info.value).startswith(f"{path}:{line_of(text, 'broken')}: invalid TOML")


def test_duplicate_asset_and_unknown_asset_reference(tmp_path: Path) -> None:
    path = write(tmp_path, HEAD + asset_toml("TST-P1") + asset_toml("TST-P1"))
    with pytest.raises(ConfigError, match="asset_id values must be unique"):
        load_config(path)
    text = HEAD + '\n[schedule.asset_interval_s]\n"TST-P9" = 30\n' + asset_toml("TST-P1")
    with pytest.raises(ConfigError, match=r"names unknown assets \['TST-P9'\]"):
        load_config(write(tmp_path, text))


def test_password_from_environment_overrides_the_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "pw").write_text("from-file\n")
    text = HEAD.replace(
        "keepalive_s = 30", 'keepalive_s = 30\nusername = "gw"\npassword_file = "pw"'
    )
    cfg = load_config(write(tmp_path, text + asset_toml("TST-P1")))
    assert cfg.broker.password() == "from-file"
    monkeypatch.setenv("WELLSPAN_BROKER_PASSWORD", "from-env")
    assert cfg.broker.password() == "from-env"


def test_cli_bad_config_exits_2_with_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    text = HEAD.replace("interval_s = 60", "interval_s = 60\nspeed = 3") + asset_toml("TST-P1")
    path = write(tmp_path, text)
    assert main(["edge", "--check", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err == f"wellspan edge: {path}:{line_of(text, 'speed = 3')}: schedule.speed: unknown key"
    assert main(["edge", "--check", str(tmp_path / "absent.toml")]) == 2
    assert "cannot read" in capsys.readouterr().err


def test_cli_check_prints_assets_layouts_budget_and_broker(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["edge", "--check", str(SAMPLE)]) == 0
    out = capsys.readouterr().out
    assert "MAL-P1" in out and "bytes_per_day" in out and "mqtt://127.0.0.1:1883" in out
    assert "do not replace the machine's protective trips" in out
    assert main(["edge", "--check", "--json", str(SAMPLE)]) == 0
    report = json.loads(capsys.readouterr().out)
    assert [a["asset_id"] for a in report["assets"]] == ["MAL-P1", "MAL-P2", "MAL-P3"]
    first = report["assets"][0]
    assert len(first["layout_digest"]) == 16 and first["indicators"] > 10
    assert report["budget"]["bytes_per_day"] == 2_000_000
    assert report["broker"]["client_id"] == "wellspan-gw-mallee"


def test_cli_check_rejects_thresholds_on_unknown_indicators(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    text = HEAD + '\n[alarms.thresholds]\n"de_accel.nonsense" = { high = 1.0 }\n'
    path = write(tmp_path, text + asset_toml("TST-P1"))
    assert main(["edge", "--check", str(path)]) == 2
    assert "de_accel.nonsense" in capsys.readouterr().err


def test_cli_run_with_an_unreadable_password_file_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    text = HEAD.replace(
        "keepalive_s = 30", 'keepalive_s = 30\nusername = "gw"\npassword_file = "missing.pw"'
    )
    path = write(tmp_path, text + asset_toml("TST-P1"))
    assert main(["edge", str(path), "--max-windows", "1"]) == 2
    err = capsys.readouterr().err.strip().splitlines()[-1]
    assert err.startswith(f"wellspan edge: {path}: cannot set up the broker connection")
    assert "missing.pw" in err


def test_cli_check_rejects_a_bad_scenario(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    text = HEAD + '\n[source.scenarios]\n"TST-P1" = "outer_race:soon"\n'
    path = write(tmp_path, text + asset_toml("TST-P1"))
    assert main(["edge", "--check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "source.scenarios.TST-P1: scenario must be" in err and err.count("\n") == 1
