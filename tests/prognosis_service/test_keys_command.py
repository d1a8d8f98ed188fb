"""``wellspan keys create|list|revoke`` end to end through the CLI entry point."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from prognosis_service.auth import verify_token
from prognosis_service.store.engine import Store
from wellspan.cli import main


def test_create_list_revoke(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    url = f"sqlite:///{tmp_path / 'keys.db'}"
    monkeypatch.setenv("WELLSPAN_DATABASE_URL", url)
    monkeypatch.delenv("WELLSPAN_CONFIG", raising=False)
    assert (
        main(
            [
                "keys",
                "create",
                "--name",
                "dispatch",
                "--scope",
                "read",
                "--site",
                "mallee",
                "--json",
            ]
        )
        == 0
    )
    created = json.loads(capsys.readouterr().out)
    token = created["token"]
    assert token.startswith(f"wsk_{created['key_id']}_")
    assert created["scopes"] == ["read"] and created["sites"] == ["mallee"]
    store = Store(url)
    try:
        with store.read() as s:
            principal = verify_token(s, token)
            assert principal is not None and principal.may_see("mallee")
            assert not principal.may_see("gibber") and not principal.has_scope("admin")
            # the token itself is not stored, only its hash
            from prognosis_service.store.models import ApiKey

            row = s.get(ApiKey, created["key_id"])
            assert row is not None and token not in row.secret_sha256
        assert main(["keys", "list"]) == 0
        table = capsys.readouterr().out
        assert created["key_id"] in table and token not in table
        assert main(["keys", "revoke", created["key_id"]]) == 0
        capsys.readouterr()
        with store.read() as s:
            assert verify_token(s, token) is None
        assert main(["keys", "revoke", "000000000000"]) == 1
        assert "no key" in capsys.readouterr().err
    finally:
        store.dispose()


def test_bad_input_exits_2(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setenv("WELLSPAN_DATABASE_URL", f"sqlite:///{tmp_path / 'k.db'}")
    assert main(["keys", "create", "--name", "x", "--scope", "read", "--site", "bad site"]) == 2
    assert "sites must be site identifiers" in capsys.readouterr().err
    monkeypatch.setenv("WELLSPAN_DATABASE_URL", "oracle://nope")
    assert main(["keys", "list"]) == 2
    assert "database_url" in capsys.readouterr().err
