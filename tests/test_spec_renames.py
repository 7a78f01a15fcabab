"""Options renamed so that one name means one thing; former names still work for one release."""

from __future__ import annotations

import pytest
import typer
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.cli.renames import FORMER_NAMES, rewrite_args
from fieldplan.errors import OptionError

runner = CliRunner()
COMMANDS = typer.main.get_command(app).commands


@pytest.mark.parametrize(
    ("command", "old", "new"),
    [(c, old, new) for c, names in FORMER_NAMES.items() for old, new in names.items()],
)
def test_every_new_name_exists_and_the_old_one_is_hidden(command, old, new):
    params = COMMANDS[command].params
    flags = {opt for p in params for opt in p.opts}
    assert new in flags and old not in flags
    result = runner.invoke(app, [command, "--help"], env={"COLUMNS": "100"})
    assert new in result.output


def test_rewrite_keeps_values_and_refuses_both_names():
    args, notes = rewrite_args("crews", ["plan", "--crews", "2", "--start=18.8,-33.9"])
    assert args == ["plan", "--crews", "2", "--drop-off=18.8,-33.9"]
    assert notes == ["note: crews --start is now --drop-off; the former name goes in the next release"]
    assert rewrite_args("crews", ["plan", "--", "--start"])[0] == ["plan", "--", "--start"]
    with pytest.raises(OptionError, match="give --drop-off only"):
        rewrite_args("crews", ["plan", "--start", "1,1", "--drop-off", "2,2"])


def test_one_meaning_per_name_across_commands():
    # common practice, no source: a flag means one thing across a tool's commands; these
    # meant several and are now hidden former names only
    for flag in ("--start", "--by", "--from", "--layout", "--value", "--units-per-cluster"):
        using = {name for name, cmd in COMMANDS.items() for p in cmd.params if flag in p.opts and not p.hidden}
        assert using == set(), (flag, using)


def test_former_composite_value_reads_as_block(tmp_path):
    import json

    from fieldplan.demo import demo_blocks_path

    out = tmp_path / "p"
    args = ["plan", str(demo_blocks_path()), "--spacing", "120", "--purpose", "soil", "--composite", "zone"]
    result = runner.invoke(app, [*args, "--formats", "core", "-q", "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "--composite zone is now --composite block" in result.output
    assert json.loads((out / "manifest.json").read_text())["parameters"]["composite"] == "block"
