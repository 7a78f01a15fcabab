"""Label sheets (geometry, QR codes that decode back to the id) and the lab sheet round trip."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
import shapely

from fieldplan.errors import OptionError
from fieldplan.plan import make_plan
from fieldplan.results import read_results
from fieldplan.samples.ids import make_sample_ids
from fieldplan.samples.lab import (
    SUBMISSION_NAME,
    TEMPLATE_NAME,
    parse_analyses,
    write_lab_sheet,
)
from fieldplan.samples.labels import (
    LAYOUTS,
    label_boxes,
    label_records,
    labels_pdf,
    labels_png,
    parse_layout,
)
from fieldplan.samples.purpose import apply_purpose
from fieldplan.store import load_plan
from tests.geoms import blocks_frame, concave, square

MM_PER_IN = 25.4  # reference: international inch, exactly 25.4 mm (1959 agreement)


def _expected_boxes(page_w, page_h, cols, rows, w, h, gap_x, gap_y, top):
    """Label boxes computed directly from the sheet description (left margin
    from centring the columns on the page)."""
    left = (page_w - cols * w - (cols - 1) * gap_x) / 2
    out = []
    for r in range(rows):
        for c in range(cols):
            x = left + c * (w + gap_x)
            y_top = page_h - top - r * (h + gap_y)
            out.append((x, y_top - h, w, h))
    return np.array(out)


def test_a4_preset_geometry():
    # reference: ISO 216, A4 = 210 x 297 mm. Sheet of 3 x 8 labels, 63.5 x 33.9 mm,
    # 2.5 mm column gap, 12.9 mm top margin (common blank sheet, from memory).
    lay = LAYOUTS["a4-3x8"]
    assert (lay.page_w, lay.page_h) == (210.0, 297.0)
    expected = _expected_boxes(210, 297, 3, 8, 63.5, 33.9, 2.5, 0.0, 12.9)
    np.testing.assert_allclose(label_boxes(lay), expected, atol=1e-9)
    # The sheet is centred: bottom margin equals the top margin.
    assert label_boxes(lay)[:, 1].min() == pytest.approx(12.9)


def test_letter_preset_geometry():
    # reference: US letter = 8.5 x 11 in (ANSI/ASME Y14.1). Sheet of 3 x 10 labels,
    # 2 5/8 x 1 in, 1/8 in column gap, 1/2 in top margin (common blank sheet, from memory).
    lay = LAYOUTS["letter-3x10"]
    assert lay.page_w == pytest.approx(8.5 * MM_PER_IN) and lay.page_h == pytest.approx(11 * MM_PER_IN)
    expected = _expected_boxes(
        8.5 * MM_PER_IN,
        11 * MM_PER_IN,
        3,
        10,
        2.625 * MM_PER_IN,
        MM_PER_IN,
        0.125 * MM_PER_IN,
        0.0,
        0.5 * MM_PER_IN,
    )
    np.testing.assert_allclose(label_boxes(lay), expected, atol=1e-9)
    assert lay.left == pytest.approx(0.1875 * MM_PER_IN)


def test_custom_layout_fills_the_page():
    lay = parse_layout("letter-2x5")
    boxes = label_boxes(lay)
    # 10 mm margins all round, 2.5 mm gaps: the labels tile the rest exactly.
    assert boxes[:, 0].min() == pytest.approx(10) and (boxes[:, 0] + boxes[:, 2]).max() == pytest.approx(
        8.5 * MM_PER_IN - 10
    )
    assert boxes[:, 1].min() == pytest.approx(10)
    assert (boxes[:, 1] + boxes[:, 3]).max() == pytest.approx(11 * MM_PER_IN - 10)
    with pytest.raises(OptionError, match="at least"):
        parse_layout("9x30")
    with pytest.raises(OptionError, match="not known"):
        parse_layout("avery")


def _records(n=30, block="B01"):
    ids = make_sample_ids(n, code="TQ7H")
    points = pd.DataFrame({"sample_id": ids, "block": block, "purpose": "soil", "depth_cm": "0-15"})
    return label_records(points, plan_id="TQ7H")


@pytest.mark.parametrize("name", ["a4-3x8", "letter-3x10"])
def test_qr_codes_decode_back_to_their_ids_in_their_boxes(name):
    import zxingcpp

    # reference: zxing-cpp decoder (independent QR reader).
    lay = LAYOUTS[name]
    records = _records(lay.per_page + 5)
    dpi = 200
    image = labels_png(records, lay, dpi=dpi)
    found = zxingcpp.read_barcodes(image)
    decoded = {r.text: r for r in found}
    expected = list(records["sample_id"][: lay.per_page])
    assert sorted(decoded) == sorted(expected)
    boxes = label_boxes(lay)
    scale = dpi / MM_PER_IN
    for i, sample_id in enumerate(expected):
        pos = decoded[sample_id].position
        cx = (pos.top_left.x + pos.bottom_right.x) / 2 / scale
        cy = lay.page_h - (pos.top_left.y + pos.bottom_right.y) / 2 / scale
        x, y, w, h = boxes[i]
        assert x < cx < x + w and y < cy < y + h
    # The overflow goes on page 2.
    second = zxingcpp.read_barcodes(labels_png(records, lay, dpi=dpi, page=1))
    assert sorted(r.text for r in second) == sorted(records["sample_id"][lay.per_page :])


def test_pdf_pages_size_and_reproducibility():
    lay = LAYOUTS["a4-3x8"]
    records = _records(30)
    pdf = labels_pdf(records, lay, date="2027-03-01")
    assert pdf.startswith(b"%PDF-")
    assert pdf == labels_pdf(records, lay, date="2027-03-01")
    assert len(re.findall(rb"/Type /Page\b", pdf)) == 2
    # reference: PDF user space unit is 1/72 in (ISO 32000-1, 8.3.2.3): A4 = 595.276 x 841.890 pt.
    box = re.search(rb"/MediaBox \[\s*0 0 ([\d.]+) ([\d.]+)", pdf)
    assert float(box.group(1)) == pytest.approx(595.276, abs=0.01)
    assert float(box.group(2)) == pytest.approx(841.890, abs=0.01)
    letter = labels_pdf(records, LAYOUTS["letter-3x10"])
    box = re.search(rb"/MediaBox \[\s*0 0 ([\d.]+) ([\d.]+)", letter)
    assert (float(box.group(1)), float(box.group(2))) == pytest.approx((612, 792), abs=0.01)


def test_skip_starts_on_a_partly_used_sheet():
    import zxingcpp

    lay = LAYOUTS["letter-3x10"]
    records = _records(3)
    image = labels_png(records, lay, skip=28, dpi=200)
    found = zxingcpp.read_barcodes(image)
    assert sorted(r.text for r in found) == sorted(records["sample_id"][:2])
    with pytest.raises(OptionError, match="--skip"):
        labels_png(records, lay, skip=30)


def _plan(name="B"):
    blocks = blocks_frame({"A": square, name: shapely.affinity.translate(concave, 600)})
    return apply_purpose(make_plan(blocks, spacing=100, seed=4), purpose="soil")


def test_lab_sheet_neutralises_formula_cells(tmp_path):
    write_lab_sheet(_plan("=HYPERLINK(1)"), tmp_path, analyses=parse_analyses("@pH"))
    sub = pd.read_csv(tmp_path / SUBMISSION_NAME, dtype=str, keep_default_na=False)
    # reference: OWASP "CSV Injection": cells starting with = + - @ are neutralised.
    assert "'=HYPERLINK(1)" in set(sub["block"])
    assert (sub["analyses"] == "'@pH").all()
    template = pd.read_csv(tmp_path / TEMPLATE_NAME, dtype=str, keep_default_na=False)
    assert list(template.columns)[-1] == "'@pH"


def test_lab_sheet_round_trip_through_the_results_reader(tmp_path):
    plan = _plan()
    analyses = parse_analyses("pH, P, K")
    write_lab_sheet(plan, tmp_path, analyses=analyses)
    sub = pd.read_csv(tmp_path / SUBMISSION_NAME, dtype=str, keep_default_na=False)
    assert list(sub.columns) == [
        "sample_id",
        "status",
        "block",
        "depth_cm",
        "purpose",
        "round",
        "collection_date",
        "analyses",
    ]
    assert len(sub) == plan.points["sample_id"].nunique()
    assert set(sub["sample_id"]) == set(plan.points["sample_id"])
    assert (sub["collection_date"] == "").all() and (sub["analyses"] == "pH;P;K").all()

    template = pd.read_csv(tmp_path / TEMPLATE_NAME, dtype=str, keep_default_na=False)
    assert list(template.columns) == ["point_id", "sample_id", "pH", "P", "K"]
    rng = np.random.default_rng(0)
    template["pH"] = np.round(rng.uniform(5.5, 7.5, len(template)), 2)
    template["P"] = np.round(rng.uniform(10, 60, len(template)), 1)
    template["K"] = np.round(rng.uniform(80, 300, len(template)), 0)
    filled = tmp_path / "filled.csv"
    template.to_csv(filled, index=False)
    table = read_results(filled, point_ids=plan.points["point_id"])
    assert table.problems.empty
    assert table.value_columns == ["ph", "p", "k"]
    assert list(table.data["point_id"]) == list(template["point_id"])
    np.testing.assert_allclose(table.data["ph"], template["pH"].astype(float))


def test_zone_composites_list_each_sample_once(tmp_path):
    blocks = blocks_frame({"A": square, "B": shapely.affinity.translate(concave, 600)})
    plan = apply_purpose(make_plan(blocks, spacing=100, seed=4), purpose="soil", composite="zone")
    write_lab_sheet(plan, tmp_path, analyses=["pH"])
    template = pd.read_csv(tmp_path / TEMPLATE_NAME, dtype=str)
    assert len(template) == 2 and template["point_id"].isin(plan.points["point_id"]).all()
    records = label_records(plan.points, plan_id=plan.params["plan_id"])
    assert list(records["detail"]) == ["soil 0-15 cm"] * 2


@pytest.mark.parametrize(
    ("text", "message"),
    [("", "at least one"), ("pH,ph", "same column"), ("pH,date", "clashes"), ("pH,--", "no letters")],
)
def test_bad_analyses_are_refused(text, message):
    with pytest.raises(OptionError, match=message):
        parse_analyses(text)


def test_cli_plan_labels_and_lab_sheet(tmp_path):
    import zxingcpp
    from PIL import Image
    from typer.testing import CliRunner

    from fieldplan.cli.main import app
    from fieldplan.demo import demo_blocks_path

    runner = CliRunner()
    out = tmp_path / "soil"
    args = ["plan", str(demo_blocks_path()), "--spacing", "150", "--purpose", "soil", "--seed", "3"]
    result = runner.invoke(app, [*args, "--cores", "15", "--out", str(out), "-q"])
    assert result.exit_code == 0, result.output
    result = runner.invoke(
        app, ["labels", str(out), "--label-sheet", "letter-3x10", "--date", "2027-03-01", "--preview"]
    )
    assert result.exit_code == 0, result.output
    assert (out / "labels.pdf").read_bytes().startswith(b"%PDF-")
    points = pd.read_csv(out / "points.csv", dtype=str)
    decoded = {r.text for r in zxingcpp.read_barcodes(Image.open(out / "labels_preview.png"))}
    assert decoded == set(points["sample_id"][:30])
    result = runner.invoke(app, ["lab-sheet", str(out), "--analyses", "pH,P,K"])
    assert result.exit_code == 0, result.output
    assert "buried services" in result.output
    sub = pd.read_csv(out / SUBMISSION_NAME, dtype=str)
    assert list(sub["sample_id"]) == list(points["sample_id"])

    bad = runner.invoke(app, ["labels", str(out), "--date", "1 March"])
    assert bad.exit_code == 2 and "YYYY-MM-DD" in bad.output
    bad = runner.invoke(app, ["lab-sheet", str(out), "--analyses", "pH,ph"])
    assert bad.exit_code == 2 and "same column" in bad.output
    bad = runner.invoke(app, ["labels", str(tmp_path / "nowhere")])
    assert bad.exit_code == 2


def test_labels_and_lab_sheet_hold_active_samples_spares_only_on_request(tmp_path):
    # common practice, no source: a bag is labelled for every sample to be taken and no other;
    # spares are printed only when asked for, apart and clearly marked, and a point given up in
    # the field has no sample. QR codes read back with zxing-cpp (reference: independent decoder).
    import zxingcpp
    from PIL import Image
    from typer.testing import CliRunner

    from fieldplan.cli.main import app
    from fieldplan.demo import demo_blocks_path
    from fieldplan.field.mark import mark_points

    runner = CliRunner()
    out = tmp_path / "ripe"
    args = ["plan", str(demo_blocks_path()), "--design", "random", "--per-block", "2", "--spares", "1"]
    result = runner.invoke(app, [*args, "--purpose", "ripeness", "--seed", "3", "--out", str(out), "-q"])
    assert result.exit_code == 0, result.output
    points = load_plan(out).points
    n_active, n_spare = int((points["status"] == "selected").sum()), int((points["status"] == "spare").sum())
    assert n_active == 28 and n_spare == 14
    gone = points.loc[points["status"] == "selected", "point_id"].iloc[0]
    mark_points(out, [gone], reason="flooded")
    points = load_plan(out).points
    active = points[points["status"].isin(["selected", "replacement"])]
    assert len(active) == n_active

    records = label_records(points, plan_id="X")
    assert set(records["sample_id"]) == set(active["sample_id"]) and len(records) == n_active
    assert gone not in set(points.loc[points["sample_id"].isin(records["sample_id"]), "point_id"])
    result = runner.invoke(app, ["labels", str(out), "--label-sheet", "4x10", "--preview"])
    assert result.exit_code == 0 and f"{n_active} labels on" in result.output
    decoded = {r.text for r in zxingcpp.read_barcodes(Image.open(out / "labels_preview.png"))}
    assert decoded == set(active["sample_id"])

    spares = label_records(points, plan_id="X", include_spares=True)
    assert len(spares) == n_active + n_spare - 1
    assert list(spares["status"][:n_active]) == list(records["status"])
    tail = spares.iloc[n_active:]
    assert (tail["status"] == "spare").all() and tail["block"].str.endswith("SPARE").all()
    assert tail["detail"].str.startswith("SPARE").all()
    result = runner.invoke(app, ["labels", str(out), "--include-spares"])
    assert result.exit_code == 0 and f"({n_spare - 1} spare(s), marked SPARE, at the end)" in result.output

    result = runner.invoke(app, ["lab-sheet", str(out), "--analyses", "Brix,pH"])
    assert result.exit_code == 0, result.output
    sub = pd.read_csv(out / SUBMISSION_NAME, dtype=str)
    assert list(sub["sample_id"]) == list(records["sample_id"])
    assert set(sub["status"]) == {"selected", "replacement"}
    template = pd.read_csv(out / TEMPLATE_NAME, dtype=str)
    assert gone not in set(template["point_id"]) and len(template) == n_active
    result = runner.invoke(app, ["lab-sheet", str(out), "--analyses", "Brix,pH", "--include-spares"])
    sub = pd.read_csv(out / SUBMISSION_NAME, dtype=str)
    assert (sub["status"] == "spare").sum() == n_spare - 1 and f"({n_spare - 1} spares)" in result.output


def test_text_outside_the_pdf_base_fonts_prints_as_question_marks():
    # reference: PDF base-14 fonts use WinAnsiEncoding (ISO 32000-1, annex D), i.e. Windows-1252.
    points = pd.DataFrame(
        {
            "sample_id": make_sample_ids(2, code="TQ7H"),
            "block": ["Château Süd", "葡萄园"],
            "purpose": "general",
        }
    )
    records = label_records(points, plan_id="TQ7H")
    pdf = labels_pdf(records, LAYOUTS["a4-3x8"])
    assert pdf.startswith(b"%PDF-")
    from fieldplan.samples.labels import label_shapes

    texts = [t[4] for t in label_shapes(records, LAYOUTS["a4-3x8"])[0]["texts"]]
    assert "Block Château Süd" in texts and "Block ???" in texts


def test_later_rounds_get_new_valid_ids_on_labels_and_sheets(tmp_path):
    import zxingcpp

    from fieldplan.samples.ids import is_valid

    plan = _plan()
    first = label_records(plan.points, plan_id="X", round_no=1)
    second = label_records(plan.points, plan_id="X", round_no=2)
    assert list(first["sample_id"]) == list(plan.points["sample_id"])
    assert not set(first["sample_id"]) & set(second["sample_id"])
    assert all(is_valid(i) for i in second["sample_id"])
    # Serials stay, so round 2 of a point is easy to match by eye.
    assert [i[5:-1] for i in first["sample_id"]] == [i[5:-1] for i in second["sample_id"]]
    # reference: zxing-cpp decoder.
    found = zxingcpp.read_barcodes(labels_png(second, LAYOUTS["a4-3x8"], dpi=200))
    assert {r.text for r in found} == set(second["sample_id"][:24])

    write_lab_sheet(plan, tmp_path, analyses=["Brix"], round_no=2)
    sub = pd.read_csv(tmp_path / "lab_submission_r2.csv", dtype=str)
    assert list(sub["sample_id"]) == list(second["sample_id"]) and set(sub["round"]) == {"2"}
    template = pd.read_csv(tmp_path / "results_template_r2.csv", dtype=str)
    assert list(template.columns) == ["point_id", "sample_id", "Brix"]
    with pytest.raises(OptionError, match="--round"):
        label_records(plan.points, plan_id="X", round_no=0)
