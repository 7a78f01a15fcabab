"""Results files in the shapes lab and field exports have: encodings, workbooks, decimal commas,
dates, label ids, outliers, removed rounds; and a refused import stores nothing."""

from __future__ import annotations

import codecs
import datetime as dt
import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
from scipy import stats
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.errors import InputError
from fieldplan.results import (
    format_problems,
    modified_z,
    outlier_suspects,
    parse_dates,
    read_results,
)
from tests.geoms import blocks_frame, lonlat_square, write_geojson

runner = CliRunner()
IDS = ["V01-001", "V01-002", "V01-003", "V02-001", "V02-002", "V02-003"]
BRIX = [23.1, 22.8, 23.5, 22.4, 23.9, 22.6]
PH = [3.41, 3.38, 3.45, 3.52, 3.36, 3.47]


def _rows(sep=",", dec="."):
    lines = [sep.join(["point_id", "brix", "ph"])]
    for i, b, p in zip(IDS, BRIX, PH, strict=True):
        lines.append(sep.join([i, f"{b}".replace(".", dec), f"{p}".replace(".", dec)]))
    return lines


def _check_values(r):
    got = r.data.set_index("point_id")
    np.testing.assert_allclose(got.loc[IDS, "brix"], BRIX)
    np.testing.assert_allclose(got.loc[IDS, "ph"], PH)
    assert r.problems.empty


# ---- encodings -------------------------------------------------------------------------------


@pytest.mark.parametrize("codec,bom", [("utf-16-le", codecs.BOM_UTF16_LE), ("utf-16-be", codecs.BOM_UTF16_BE)])
def test_utf16_with_bom_tab_separated(tmp_path, codec, bom):
    # Spreadsheets' "Unicode text" export: UTF-16 with a byte order mark, tab separated, CRLF.
    # reference: Unicode byte order marks FF FE / FE FF (Python codecs.BOM_UTF16_LE/BE)
    p = tmp_path / "lab.txt"
    p.write_bytes(bom + "\r\n".join(_rows("\t")).encode(codec) + "\r\n".encode(codec))
    r = read_results(p, point_ids=IDS)
    _check_values(r)
    assert any("UTF-16" in n for n in r.notes)
    # reference: hashlib SHA-256 of the raw bytes, so a re-import of the same file is recognised
    assert r.sha256 == hashlib.sha256(p.read_bytes()).hexdigest()


def test_utf8_bom_and_windows_1252(tmp_path):
    p = tmp_path / "bom.csv"
    p.write_bytes(codecs.BOM_UTF8 + "\n".join(_rows()).encode())
    _check_values(read_results(p, point_ids=IDS))
    q = tmp_path / "cp1252.csv"
    # common practice, no source: older lab software writes Windows-1252 ("°Brix")
    q.write_bytes("\n".join(["point_id,°Brix,pH"] + _rows()[1:]).encode("cp1252"))
    r = read_results(q, point_ids=IDS)
    assert r.value_columns == ["brix", "ph"]
    assert any("Windows-1252" in n for n in r.notes)


# ---- workbooks -------------------------------------------------------------------------------


def _workbook(path: Path) -> Path:
    openpyxl = pytest.importorskip("openpyxl")
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Summary"
    ws.append(["Laboratory report"])
    ws.append(["nothing to see"])
    lab = wb.create_sheet("Results")
    lab.append(["Report 2026-117, grape juice analysis"])  # a title above the header, as lab exports do
    lab.append([])
    lab.append(["Point ID", "Sampled", "Brix", "pH"])
    for i, b, p in zip(IDS, BRIX, PH, strict=True):
        lab.append([i, dt.datetime(2026, 3, 2), b, p])
    wb.save(path)
    return path


def test_xlsx_named_sheet_header_below_a_title(tmp_path):
    p = _workbook(tmp_path / "lab.xlsx")
    # reference: openpyxl wrote these cells; reading them back gives the same numbers and dates
    r = read_results(p, point_ids=IDS, sheet="Results")
    _check_values(r)
    assert (r.data["date"] == pd.Timestamp("2026-03-02")).all()
    assert any("'Results'" in n for n in r.notes) and any("'Sampled'" in n for n in r.notes)
    # The first problem row is the sheet's own row number (header on row 3, first data on row 4).
    assert int(r.data["row"].iloc[0]) == 4
    with pytest.raises(InputError, match="no point_id or sample_id column"):
        read_results(p, point_ids=IDS)  # first sheet is the summary
    with pytest.raises(InputError, match="'Summary', 'Results'"):
        read_results(p, point_ids=IDS, sheet="Nope")


# ---- separators and decimal commas ---------------------------------------------------------


def test_semicolon_file_with_decimal_commas(tmp_path):
    # common practice, no source: where the decimal mark is a comma, CSV uses ';'
    p = tmp_path / "eu.csv"
    p.write_text("\n".join(_rows(";", ",")) + "\n", encoding="utf-8")
    r = read_results(p, point_ids=IDS)
    _check_values(r)
    assert not any("decimal commas" in n for n in r.notes)


def test_separator_line_written_by_spreadsheets(tmp_path):
    # common practice, no source: spreadsheet CSV exports may start with a "sep=;" line
    p = tmp_path / "sep.csv"
    p.write_text("sep=;\n" + "\n".join(_rows(";", ",")) + "\nNOPE;1;2\n", encoding="utf-8")
    r = read_results(p, point_ids=IDS)
    assert r.data.set_index("point_id").loc[IDS, "brix"].tolist() == BRIX
    # rows keep the file's own numbers: the separator line is line 1, the header line 2
    assert r.problems["row"].tolist() == [len(IDS) + 3]


def test_comma_file_with_unquoted_decimal_commas_is_repaired_and_said(tmp_path):
    p = tmp_path / "commas.csv"
    p.write_text("\n".join(_rows(",", ",")) + "\n", encoding="utf-8")
    r = read_results(p, point_ids=IDS)
    # common practice, no source: "23,1" split by a comma separator is the number 23.1
    _check_values(r)
    assert any("unquoted decimal commas in 6 row(s)" in n for n in r.notes)


def test_ambiguous_decimal_commas_are_refused_naming_the_row(tmp_path):
    p = tmp_path / "ambiguous.csv"
    # 3 value columns, 5 cells: 23,1|3|45,6 or 23|1,3|45,6 or 23,1|3,45|6 cannot be told apart
    p.write_text("point_id,brix,ph,ta\nV01-001,23,1,3,45,6\n", encoding="utf-8")
    with pytest.raises(InputError, match="row 2: its decimal commas can be read more than one way"):
        read_results(p, point_ids=IDS)


def test_exact_duplicate_header_refused_naming_the_column(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_text("point_id,brix,brix\nV01-001,23.1,22.9\n", encoding="utf-8")
    with pytest.raises(InputError, match="column 'brix' appears twice \\(columns 2 and 3\\)"):
        read_results(p, point_ids=IDS)


# ---- dates -----------------------------------------------------------------------------------


def test_dates_day_first_month_first_and_ambiguous():
    # reference: ISO 8601 calendar dates; day-first and month-first orders told apart by a part > 12
    iso, order = parse_dates(pd.Series(["2026-03-31", "2026-04-01"]))
    assert order == "iso" and list(iso.dt.day) == [31, 1]
    dmy, order = parse_dates(pd.Series(["31/03/2026", "01/04/2026"]))
    assert order == "dmy" and list(dmy.dt.month) == [3, 4]
    mdy, order = parse_dates(pd.Series(["03/31/2026", "04/01/2026"]))
    assert order == "mdy" and list(mdy.dt.month) == [3, 4] and list(mdy.dt.day) == [31, 1]
    with pytest.raises(InputError, match="--date-format"):
        parse_dates(pd.Series(["03/04/2026", "05/04/2026"]))
    given, _ = parse_dates(pd.Series(["03/04/2026"]), date_format="mdy")
    assert given.iloc[0] == pd.Timestamp("2026-03-04")
    dotted, _ = parse_dates(pd.Series(["04.03.2026"]), date_format="dmy")
    assert dotted.iloc[0] == pd.Timestamp("2026-03-04")
    with pytest.raises(InputError, match="both day first and month first"):
        parse_dates(pd.Series(["31/03/2026", "03/31/2026"]))


def test_ignored_date_columns_are_said(tmp_path):
    p = tmp_path / "dates.csv"
    p.write_text(
        "point_id,date,received,brix\nV01-001,March 2,2026-03-04,23.1\nV01-002,March 2,2026-03-04,22.8\n",
        encoding="utf-8",
    )
    r = read_results(p, point_ids=IDS)
    assert any("date column 'date' ignored" in n for n in r.notes)
    assert any("column 'received' holds dates and was ignored" in n for n in r.notes)
    assert r.value_columns == ["brix"]


# ---- problems summarised ---------------------------------------------------------------------


def test_one_summary_line_per_kind_of_problem(tmp_path):
    p = tmp_path / "wrong-plan.csv"
    p.write_text("point_id,brix\n" + "".join(f"X{i:03d},22.{i % 10}\n" for i in range(140)), encoding="utf-8")
    r = read_results(p, point_ids=IDS)
    text = format_problems(r.problems)
    # common practice, no source: 140 identical complaints are one line with a count
    assert text.count("\n") == 0
    assert text.startswith("[point_id] unmatched point id: 140 rows (2, 3, 4")
    few = format_problems(r.problems.head(2))
    assert few.count("\n") == 1 and few.startswith("row 2: X000 [point_id] unmatched point id")


# ---- outliers ----------------------------------------------------------------------------------


def test_modified_z_matches_iglewicz_hoaglin_formula():
    x = np.array([23.1, 22.8, 23.5, 2.31, 23.0, 22.6, 24.0, 23.3, np.nan])
    ok = x[np.isfinite(x)]
    med = np.median(ok)
    # reference: Iglewicz & Hoaglin (1993), How to Detect and Handle Outliers, M_i = 0.6745 (x_i - median) / MAD
    mad = stats.median_abs_deviation(ok, scale=1.0)
    np.testing.assert_allclose(modified_z(x)[:-1], 0.6745 * (ok - med) / mad, rtol=1e-12)
    assert np.isnan(modified_z(x)[-1])
    # reference: scipy's normal-consistent MAD (MAD / 0.67449) gives the same scale to 4 digits
    scaled = stats.median_abs_deviation(ok, scale="normal")
    np.testing.assert_allclose(modified_z(x)[:-1], (ok - med) / scaled, rtol=1e-4)
    assert np.isnan(modified_z([5.0, 5.0, 5.0, 6.0])).all()  # MAD 0: no scale, no verdict


def test_decimal_slip_is_a_suspect(tmp_path):
    p = tmp_path / "slip.csv"
    values = BRIX.copy()
    values[3] = 2.24  # 22.4 typed without its decimal place moved: inside the 0-40 plausible range
    p.write_text("point_id,brix\n" + "".join(f"{i},{v}\n" for i, v in zip(IDS, values, strict=True)))
    r = read_results(p, point_ids=IDS)
    assert r.problems.empty  # the plausible range alone lets it through
    sus = outlier_suspects(r)
    # reference: Iglewicz & Hoaglin (1993): |M| > 3.5 marks a potential outlier
    assert sus["point_id"].tolist() == ["V02-001"] and sus["z"].iloc[0] < -3.5
    assert int(sus["row"].iloc[0]) == 5


# ---- through the command -----------------------------------------------------------------------


@pytest.fixture(scope="module")
def soil_plan(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("soil")
    frame = blocks_frame({f"B{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(2)}, crs="EPSG:4326")
    plan = tmp / "plan"
    made = runner.invoke(
        app,
        ["plan", str(write_geojson(frame, tmp / "b.geojson")), "--design", "random", "--per-block", "8",
         "--spares", "2", "--purpose", "soil", "--seed", "3", "--out", str(plan), "-q"],
    )  # fmt: skip
    assert made.exit_code == 0, made.output
    return plan


@pytest.fixture
def plan_dir(soil_plan, tmp_path):
    import shutil

    dst = tmp_path / "plan"
    shutil.copytree(soil_plan, dst)
    return dst


def _points(plan):
    return pyogrio.read_dataframe(plan / "plan.gpkg", layer="points", read_geometry=False)


def _layer_or_none(plan, name):
    if name not in {row[0] for row in pyogrio.list_layers(plan / "plan.gpkg")}:
        return None
    return pyogrio.read_dataframe(plan / "plan.gpkg", layer=name, read_geometry=False)


def _ph_file(path, ids, values, key="point_id"):
    path.write_text(f"{key},ph\n" + "".join(f"{i},{v}\n" for i, v in zip(ids, values, strict=True)))
    return path


def test_sample_id_keyed_file_and_active_count(plan_dir, tmp_path):
    pts = _points(plan_dir)
    active = pts[pts["status"] == "selected"]
    assert len(active) == 16 and len(pts) == 20  # 2 spares per block are not part of the sample
    values = [6.3, 6.35, 6.4, 6.45, 6.5, 6.55, 6.6, 6.65] * 2
    # Lab files carry the label ids, often typed in lower case without the hyphen.
    labels = [s.lower().replace("-", "") for s in active["sample_id"]]
    path = _ph_file(tmp_path / "lab.csv", labels + ["ZZZZ-9999"], values + [6.0],
                    key="Sample ID")  # fmt: skip
    res = runner.invoke(app, ["results", str(plan_dir), str(path)])
    assert res.exit_code == 0, res.output
    # common practice, no source: only points to be sampled count in "N of M"
    assert "Stored round 1: 16 of 16 active plan points" in res.stdout
    assert "unmatched sample id" in res.stderr and "matched to points by sample_id" in res.stderr
    stored = _layer_or_none(plan_dir, "results")
    assert set(stored["point_id"]) == set(active["point_id"])


def test_outliers_refused_until_accepted_and_nothing_stored(plan_dir, tmp_path):
    pts = _points(plan_dir)
    ids = pts.loc[pts["status"] == "selected", "point_id"].tolist()
    values = [6.3, 6.35, 6.4, 6.45, 6.5, 6.55, 6.6, 6.65] * 2
    values[4] = 2.6  # plausible pH (range 2-11) but far from a round near 6.5
    path = _ph_file(tmp_path / "slip.csv", ids, values)
    before = (plan_dir / "plan.gpkg").read_bytes()
    refused = runner.invoke(app, ["results", str(plan_dir), str(path)])
    assert refused.exit_code == 2
    assert "modified z-score beyond 3.5" in refused.stderr and ids[4] in refused.stderr
    assert "--accept-outliers" in refused.stderr
    assert (plan_dir / "plan.gpkg").read_bytes() == before  # a refused import stores nothing
    ok = runner.invoke(app, ["results", str(plan_dir), str(path), "--accept-outliers"])
    assert ok.exit_code == 0, ok.output
    assert set(_layer_or_none(plan_dir, "results")["round"]) == {1}


def test_duplicate_header_and_bad_positions_store_nothing(plan_dir, tmp_path):
    ids = _points(plan_dir)["point_id"].tolist()[:6]
    before = (plan_dir / "plan.gpkg").read_bytes()
    dup = tmp_path / "dup.csv"
    dup.write_text("point_id,ph,ph\n" + "".join(f"{i},6.1,6.2\n" for i in ids))
    res = runner.invoke(app, ["results", str(plan_dir), str(dup)])
    assert res.exit_code == 2 and "column 'ph' appears twice" in res.stderr
    good = _ph_file(tmp_path / "good.csv", ids, [6.1, 6.2, 6.3, 6.0, 6.4, 6.2])
    gpx = tmp_path / "taken.gpx"
    gpx.write_text("<gpx><wpt lat='x' lon='1'><name>", encoding="utf-8")
    bad = runner.invoke(app, ["results", str(plan_dir), str(good), "--positions", str(gpx)])
    assert bad.exit_code == 2
    # common practice, no source: a failed import leaves the record as it was, and may be re-run
    assert (plan_dir / "plan.gpkg").read_bytes() == before
    unknown = tmp_path / "unknown.gpx"
    unknown.write_text(
        '<?xml version="1.0"?><gpx version="1.1" creator="t" xmlns="http://www.topografix.com/GPX/1/1">'
        '<wpt lat="47.001" lon="15.001"><name>NOT-A-POINT</name></wpt></gpx>',
        encoding="utf-8",
    )
    stray = runner.invoke(app, ["results", str(plan_dir), str(good), "--positions", str(unknown)])
    assert stray.exit_code == 2 and "NOT-A-POINT" in stray.stderr
    assert (plan_dir / "plan.gpkg").read_bytes() == before
    again = runner.invoke(app, ["results", str(plan_dir), str(good)])
    assert again.exit_code == 0, again.output


def test_remove_round_is_logged_and_kept_aside(plan_dir, tmp_path):
    ids = _points(plan_dir)["point_id"].tolist()[:6]
    first = _ph_file(tmp_path / "r1.csv", ids, [6.1, 6.2, 6.3, 6.0, 6.4, 6.2])
    second = _ph_file(tmp_path / "r2.csv", ids, [6.6, 6.7, 6.5, 6.8, 6.6, 6.7])
    assert runner.invoke(app, ["results", str(plan_dir), str(first)]).exit_code == 0
    assert runner.invoke(app, ["results", str(plan_dir), str(second)]).exit_code == 0
    gone = runner.invoke(app, ["results", str(plan_dir), "--remove-round", "1", "--reason", "wrong plan", "--recorded-by", "ana"])
    assert gone.exit_code == 0, gone.output
    assert "Removed round 1 (r1.csv, 6 values)" in gone.stdout and "event 1" in gone.stdout
    kept = _layer_or_none(plan_dir, "results")
    assert set(kept["round"]) == {2}
    aside = _layer_or_none(plan_dir, "results_removed")
    assert set(aside["round"]) == {1} and len(aside) == 6
    events = _layer_or_none(plan_dir, "events")
    # common practice, no source: an audit trail records every removal with who, what and why
    row = events.iloc[-1]
    assert row["action"] == "remove-round" and row["user"] == "ana"
    assert "round 1 removed (r1.csv, 6 values" in row["reason"] and "wrong plan" in row["reason"]
    # The removed file may be imported again; it gets a new round number, never a reused one.
    third = runner.invoke(app, ["results", str(plan_dir), str(first)])
    assert third.exit_code == 0 and "Stored round 3" in third.stdout
    missing = runner.invoke(app, ["results", str(plan_dir), "--remove-round", "7"])
    assert missing.exit_code == 2 and "stored rounds: 2, 3" in missing.stderr
    neither = runner.invoke(app, ["results", str(plan_dir)])
    assert neither.exit_code == 2 and "--remove-round" in neither.stderr
