"""``fieldplan plan`` options made from the spec: panels, typed choices, former names, help width."""

from __future__ import annotations

import json
import re

import pytest
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.spec import PANELS, flag_of, spec_schema

runner = CliRunner()
CHOICES = [(f["name"], f["choices"]) for f in spec_schema()["fields"] if f["kind"] == "choice"]


@pytest.mark.parametrize(("name", "choices"), CHOICES, ids=[n for n, _ in CHOICES])
def test_every_choice_typo_fails_before_reading_and_lists_the_choices(tmp_path, name, choices):
    missing = tmp_path / "no-such-blocks.geojson"  # never read: the choice fails first
    result = runner.invoke(app, ["plan", str(missing), flag_of(name), "nonsense", "--out", str(tmp_path / "o")])
    assert result.exit_code == 2
    text = " ".join(result.output.replace("│", " ").split())
    assert "nonsense" in text and "no-such-blocks" not in text
    for choice in choices:
        assert f"'{choice}'" in text
    assert not (tmp_path / "o").exists()


def test_spec_checks_fail_before_reading(tmp_path):
    missing = tmp_path / "no-such-blocks.geojson"
    result = runner.invoke(app, ["plan", str(missing), "--spacing", "40", "--per-block", "3", "--out", str(tmp_path / "o")])
    assert result.exit_code == 2
    assert "--per-block applies to --design" in result.output and "no-such-blocks" not in result.output


def test_help_fits_80_columns_in_panels_without_cut_names():
    result = runner.invoke(app, ["plan", "--help"], env={"COLUMNS": "80", "TERMINAL_WIDTH": "80"})
    assert result.exit_code == 0
    lines = result.output.splitlines()
    assert max(len(line) for line in lines) <= 80
    assert "…" not in result.output
    for title in PANELS.values():
        assert re.search(rf"─ {re.escape(title)} ─", result.output), title
    flags = set(re.findall(r"(?<![\w-])--[a-z](?:[a-z-]*[a-z])?", result.output))
    for field in spec_schema()["fields"]:
        assert field["flag"] in flags, field["flag"]
        for alias in field["aliases"]:
            assert not re.search(rf"│\s+{re.escape(alias)}\s", result.output)  # former names stay hidden


@pytest.mark.parametrize(
    ("old", "new", "value", "key"),
    [
        ("--layout", "--grid-layout", "triangular", "grid_layout"),
        ("--start", "--random-start", "block", "random_start"),
    ],
)
def test_former_names_still_work_with_a_note(tmp_path, old, new, value, key):
    out = tmp_path / "p"
    result = runner.invoke(app, ["plan", str(demo_blocks_path()), "--spacing", "60", old, value, "--out", str(out), "-q"])
    assert result.exit_code == 0, result.output
    assert f"{old} is now {new}" in result.output
    assert json.loads((out / "manifest.json").read_text())["parameters"][key] == value


def test_old_and_new_name_disagreeing_is_an_error(tmp_path):
    args = ["plan", str(demo_blocks_path()), "--spacing", "60", "--layout", "square", "--grid-layout", "triangular"]
    result = runner.invoke(app, [*args, "--out", str(tmp_path / "p")])
    assert result.exit_code == 2 and "--grid-layout only" in result.output


def test_choices_are_case_insensitive(tmp_path):
    out = tmp_path / "p"
    result = runner.invoke(app, ["plan", str(demo_blocks_path()), "--design", "Balanced", "--per-block", "2", "--out", str(out), "-q"])
    assert result.exit_code == 0, result.output
    assert json.loads((out / "manifest.json").read_text())["parameters"]["design"] == "balanced"
