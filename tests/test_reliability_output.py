"""Unsafe output: text from input files in HTML and CSV, file names, cautions, row-model checks."""

from __future__ import annotations

import csv
import json
import os
from pathlib import Path

import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.errors import InputError, InvalidBlocksError
from fieldplan.read import ROW_LIMITS, check_row_attributes, read_blocks
from fieldplan.safety import CAUTIONS, MAX_CAUTIONS, load_cautions
from fieldplan.write.safe import neutralise_csv_cell, safe_filename
from tests.geoms import blocks_frame, lonlat_square, write_geojson

runner = CliRunner()

XSS = "<img src=x onerror=alert(1)>"
# reference: OWASP "CSV Injection" — cells beginning with =, +, -, @ (and tab, CR) are run as formulas.
FORMULAS = ['=HYPERLINK("http://example.invalid","x")', "+1+1", "-2+3", "@SUM(A1:A2)"]
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


@pytest.fixture(scope="module")
def hostile_plan(tmp_path_factory):
    """A plan whose block names are an HTML tag and spreadsheet formulas, written through the CLI."""
    tmp = tmp_path_factory.mktemp("hostile")
    names = [XSS, *FORMULAS]
    geoms = {name: lonlat_square(15.0 + 0.004 * i, 47.0) for i, name in enumerate(names)}
    frame = blocks_frame(geoms, crs="EPSG:4326", variety=[XSS, "=1+1", "x", "y", "z"])
    source = write_geojson(frame, tmp / "hostile.geojson")
    out = tmp / "plan"
    result = runner.invoke(app, ["plan", str(source), "--spacing", "60", "--seed", "3", "--out", str(out)])
    assert result.exit_code == 0, result.output
    return out, result


def test_input_text_never_unescaped_in_html(hostile_plan):
    out, _ = hostile_plan
    pages = list(out.rglob("*.html"))
    assert pages, "a plan folder carries map.html"
    for page in pages:
        text = page.read_text(encoding="utf-8")
        # reference: HTML Living Standard §13.1.2 — '<' starts a tag; escaped text cannot.
        assert XSS not in text, page.name
        assert "onerror=alert(1)>" not in text.replace("onerror=alert(1)&gt;", ""), page.name


def _cells(path: Path) -> list[list[str]]:
    with path.open(newline="", encoding="utf-8") as handle:
        return list(csv.reader(handle))


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


@pytest.mark.parametrize("name", ["points.csv", "summary.csv"])
def test_csv_formula_cells_neutralised(hostile_plan, name):
    out, _ = hostile_plan
    rows = _cells(out / name)
    header, body = rows[0], rows[1:]
    blocks = {row[header.index("block")] for row in body}
    # Every hostile name is present, with a leading apostrophe where it starts like a formula.
    assert {"'" + f for f in FORMULAS} <= blocks
    assert XSS in blocks
    for row in body:
        for cell in row:
            assert not (cell.startswith(FORMULA_START) and not _is_number(cell)), (name, cell)


def test_every_csv_in_plan_neutralised(hostile_plan):
    out, _ = hostile_plan
    for path in out.rglob("*.csv"):
        for row in _cells(path)[1:]:
            for cell in row:
                assert not (cell.startswith(FORMULA_START) and not _is_number(cell)), (path.name, cell)


@given(st.text(min_size=1), st.sampled_from(FORMULA_START))
@settings(max_examples=60, deadline=None)
def test_neutralise_csv_cell_property(rest, prefix):
    # reference: OWASP "CSV Injection": prefix the cell with a single quote.
    assert neutralise_csv_cell(prefix + rest) == "'" + prefix + rest
    assert neutralise_csv_cell(-float(len(rest))) == -float(len(rest))


_RESERVED_DEVICES = {"con", "prn", "aux", "nul"} | {
    f"{dev}{d}" for dev in ("com", "lpt") for d in "0123456789\u00b9\u00b2\u00b3"
}


@given(
    st.one_of(
        st.text(),
        st.builds(
            lambda a, b: a + b,
            st.sampled_from(
                ["../", "..\\", "/", "C:\\", "\\\\server\\", "~/", "CON", "nul.", "com\u00b9", ".."]
            ),
            st.text(),
        ),
    )
)
@settings(max_examples=200, deadline=None)
def test_safe_filename_never_escapes(name):
    # reference: Microsoft "Naming Files, Paths, and Namespaces" (reserved device names, separators).
    result = safe_filename(name)
    assert result and result.strip() == result
    assert "/" not in result and "\\" not in result and "\x00" not in result
    assert ".." not in result
    assert result.split(".")[0].lower() not in _RESERVED_DEVICES
    assert not result.endswith((".", " "))
    base = Path("/srv/plan")
    assert (base / result).parent == base
    assert os.path.normpath(os.path.join(base, result)).startswith(str(base) + os.sep)


def test_safe_filename_examples():
    assert safe_filename("../../etc/passwd") == "etc_passwd"
    assert safe_filename("/abs/path") == "abs_path"
    assert safe_filename("CON") == "_CON"
    assert safe_filename("lpt1.txt") == "_lpt1.txt"
    assert safe_filename("..") == "unnamed"
    assert safe_filename("Block 7 (north)") == "Block_7_north"


def _good(tmp: Path) -> Path:
    frame = blocks_frame({f"B{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(2)}, crs="EPSG:4326")
    return write_geojson(frame, tmp / "blocks.geojson")


def test_default_cautions_in_readme_cli_and_manifest(tmp_path):
    out = tmp_path / "plan"
    result = runner.invoke(app, ["plan", str(_good(tmp_path)), "--spacing", "60", "--out", str(out)])
    assert result.exit_code == 0, result.output
    readme = (out / "README.txt").read_text(encoding="utf-8")
    manifest = json.loads((out / "manifest.json").read_text())
    for caution in CAUTIONS:
        assert caution in readme
        assert caution in result.stdout
    assert manifest["cautions"] == CAUTIONS and manifest["cautions_source"] == "default"
    # common practice, no source: the cautions cover re-entry intervals, heat, machinery, buried services.
    joined = " ".join(CAUTIONS).lower()
    for topic in ("re-entry", "heat", "water", "shade", "machinery", "uneven ground", "buried services"):
        assert topic in joined


def test_custom_cautions_replace_defaults_everywhere(tmp_path):
    cautions = tmp_path / "cautions.txt"
    cautions.write_text(
        "# farm list\nRing the office before entering block V3.\n\nNo entry 48 h after copper spray.\n",
        encoding="utf-8",
    )
    out = tmp_path / "plan"
    default = tmp_path / "default"
    source = _good(tmp_path)
    runner.invoke(app, ["plan", str(source), "--spacing", "60", "--out", str(default)])
    result = runner.invoke(
        app, ["plan", str(source), "--spacing", "60", "--cautions", str(cautions), "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    mine = ["Ring the office before entering block V3.", "No entry 48 h after copper spray."]
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["cautions"] == mine and manifest["cautions_source"] == str(cautions)
    readme = (out / "README.txt").read_text(encoding="utf-8")
    for text in (readme, result.stdout, (out / "map.html").read_text(encoding="utf-8")):
        assert all(line in text for line in mine)
        assert CAUTIONS[0] not in text
    # summary.csv stays a table: same columns with or without custom cautions.
    assert _cells(out / "summary.csv") == _cells(default / "summary.csv")


def test_cautions_file_limits(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_cautions(tmp_path / "none.txt")
    many = tmp_path / "many.txt"
    many.write_text("\n".join(f"caution {i}" for i in range(MAX_CAUTIONS + 1)))
    with pytest.raises(InputError, match=f"keep at most {MAX_CAUTIONS}"):
        load_cautions(many)
    long = tmp_path / "long.txt"
    long.write_text("x" * 500)
    with pytest.raises(InputError, match="caution 1 has 500 characters"):
        load_cautions(long)


def _row_blocks(**columns):
    geoms = {
        name: shapely.box(500_000 + 200 * i, 5_300_000, 500_150 + 200 * i, 5_300_150)
        for i, name in enumerate("ABC")
    }
    frame = blocks_frame(geoms, **columns)
    frame.attrs["source"] = "vineyard.geojson"
    return frame


@pytest.mark.parametrize(
    ("columns", "message"),
    [
        (
            {"plant_spacing_m": [1.0, 1.2, 1.1]},
            "vineyard.geojson: block 'A' (and 2 more) has no row_spacing_m",
        ),
        (
            {"row_spacing_m": [2.5, np.nan, 2.5], "plant_spacing_m": [1.0, 1.2, 1.1]},
            "block 'B' has no row_spacing_m",
        ),
        (
            {"row_spacing_m": [2.5, 0.0, 2.5], "plant_spacing_m": [1.0, 1.2, 1.1]},
            "block 'B' has row_spacing_m=0, which is not positive",
        ),
        (
            {"row_spacing_m": [2.5, 2.5, -3.0], "plant_spacing_m": [1.0, 1.2, 1.1]},
            "block 'C' has row_spacing_m=-3, which is not positive",
        ),
        (
            {"row_spacing_m": [25.0, 2.5, 2.5], "plant_spacing_m": [1.0, 1.2, 1.1]},
            "block 'A' has row_spacing_m=25, outside the usual 0.5 to 12 m",
        ),
        (
            {"row_spacing_m": [2.5, 2.5, 2.5], "plant_spacing_m": [1.0, 0.05, 1.1]},
            "block 'B' has plant_spacing_m=0.05, outside the usual 0.2 to 15 m",
        ),
    ],
)
def test_row_attributes_needed(columns, message):
    # common practice, no source: rows 0.5-12 m apart, plants 0.2-15 m apart (vines, orchards, row crops).
    assert ROW_LIMITS["row_spacing_m"] == (0.5, 12.0) and ROW_LIMITS["plant_spacing_m"] == (0.2, 15.0)
    blocks = _row_blocks(**columns)
    with pytest.raises(InvalidBlocksError) as info:
        check_row_attributes(blocks, needed=True)
    assert message in str(info.value)
    # Not needed (a grid plan): the same values give a note, not an error.
    notes = check_row_attributes(blocks, needed=False)
    assert all("vineyard.geojson" in n for n in notes)


def test_row_attributes_plausible_pass_and_missing_allowed():
    blocks = _row_blocks(row_spacing_m=[2.5, 3.0, np.nan], plant_spacing_m=[1.0, 1.5, np.nan])
    assert check_row_attributes(blocks, needed=True, allow_missing=True) == []
    with pytest.raises(InvalidBlocksError, match="block 'C' has no row_spacing_m"):
        check_row_attributes(blocks, needed=True)


def test_implausible_row_values_noted_when_reading(tmp_path):
    frame = blocks_frame(
        {f"B{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(3)},
        crs="EPSG:4326",
        row_spacing_m=[2.5, 0.0, 40.0],
        row_bearing_deg=[10.0, 720.0, 30.0],
    )
    blocks = read_blocks(write_geojson(frame, tmp_path / "b.geojson"))
    notes = " | ".join(blocks.attrs["notes"])
    assert "row_spacing_m outside 0.5 to 12 m in 2 block(s) (B1=0, B2=40)" in notes
    assert "row_bearing_deg outside -360 to 360 degrees in 1 block(s) (B1=720)" in notes


def test_clusters_design_refuses_implausible_spacing(tmp_path):
    frame = blocks_frame(
        {f"V{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(2)},
        crs="EPSG:4326",
        row_spacing_m=[2.5, 30.0],
        plant_spacing_m=[1.2, 1.2],
        row_bearing_deg=[0.0, 0.0],
    )
    source = write_geojson(frame, tmp_path / "vines.geojson")
    out = tmp_path / "o"
    args = ["plan", str(source), "--design", "clusters", "--per-block", "3", "--out", str(out)]
    result = runner.invoke(app, args)
    assert result.exit_code == 2, result.output
    assert "vines.geojson: block 'V1' has row_spacing_m=30, outside the usual 0.5 to 12 m" in result.stderr
    assert not out.exists()
