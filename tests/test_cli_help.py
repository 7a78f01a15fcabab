"""``--help`` at 80 columns: every option name printed whole, no line wider than the terminal."""

from __future__ import annotations

import pytest
import typer
from typer.testing import CliRunner

from fieldplan.cli.main import app

runner = CliRunner()
COMMAND = typer.main.get_command(app)


@pytest.mark.parametrize("name", sorted(COMMAND.commands))
def test_help_keeps_option_names_whole_at_80_columns(name):
    # common practice, no source: 80 columns is the classic terminal width (VT100).
    result = runner.invoke(app, [name, "--help"], env={"COLUMNS": "80"}, terminal_width=80)
    assert result.exit_code == 0, result.output
    text = result.output
    assert "…" not in text
    assert max(len(line) for line in text.splitlines()) <= 80
    words = set(text.replace(",", " ").replace("/", " ").split())
    for param in COMMAND.commands[name].params:
        if getattr(param, "hidden", False) or param.param_type_name != "option":
            continue
        for opt in [*param.opts, *param.secondary_opts]:
            assert opt in words, f"{name}: {opt} missing or cut"


def test_top_level_help_at_80_columns():
    result = runner.invoke(app, ["--help"], env={"COLUMNS": "80"}, terminal_width=80)
    assert result.exit_code == 0
    assert max(len(line) for line in result.output.splitlines()) <= 80
    for name in COMMAND.commands:
        assert name in result.output
