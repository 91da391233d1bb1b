"""The tailgauge command line."""

from __future__ import annotations

import pytest

from service.cli import main


def test_serve_refuses_invalid_settings_without_starting(capsys):
    assert main(["serve", "--workers", "0"]) == 2
    assert "workers" in capsys.readouterr().err


def test_a_command_is_required(capsys):
    with pytest.raises(SystemExit) as raised:
        main([])
    assert raised.value.code == 2
    assert "COMMAND" in capsys.readouterr().err
