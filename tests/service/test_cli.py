"""The tailgauge command line."""

from __future__ import annotations

import pytest

from service.cli import main


def test_run_subcommand_is_reserved_but_not_yet_available(capsys, tmp_path):
    status = main(["run", str(tmp_path / "batch.json"), "--out", str(tmp_path / "out.json")])
    assert status == 2
    assert "not yet available" in capsys.readouterr().err


def test_serve_refuses_invalid_settings_without_starting(capsys):
    assert main(["serve", "--workers", "0"]) == 2
    assert "workers" in capsys.readouterr().err


def test_a_command_is_required(capsys):
    with pytest.raises(SystemExit) as raised:
        main([])
    assert raised.value.code == 2
    assert "COMMAND" in capsys.readouterr().err
