"""Crop profiles: shipped profiles load and hold trade values; user files are validated."""

from __future__ import annotations

import tomllib

import pytest
import shapely

from fieldplan.errors import InputError
from fieldplan.plan import make_plan
from fieldplan.samples.profiles import load_profile, parse_profile, shipped_profiles
from fieldplan.samples.purpose import apply_purpose
from tests.geoms import blocks_frame, square

SHIPPED = ["pome-fruit", "stone-fruit", "table-grapes", "wine-grapes"]


def test_shipped_profiles_load_and_say_where_their_numbers_come_from():
    assert shipped_profiles() == SHIPPED
    for name in SHIPPED:
        profile = load_profile(name)
        assert profile.name == name
        assert "no published source" in profile.basis
        assert profile.sides in ("both", "one")


def test_wine_grape_profile_holds_trade_practice():
    # common practice, no source (from memory): 100-200 berries per sample, both
    # sides of the row, sun and shade, top/middle/bottom of bunches, skip end
    # plants and border rows.
    p = load_profile("wine-grapes")
    assert p.per_sample == (100, 200) and p.unit == "berry"
    assert p.sides == "both"
    assert set(p.exposure) == {"sun", "shade"}
    assert set(p.heights) == {"top", "middle", "bottom"}
    assert p.skip_end_plants >= 1 and p.skip_border_rows >= 1
    assert p.units_text == "100-200 berries"
    assert "both sides of the row" in p.instructions


def test_fruit_profiles_count_whole_fruit():
    # common practice, no source (from memory): maturity tests of apples, pears and
    # stone fruit use on the order of 10-20 fruit per sample.
    for name in ("pome-fruit", "stone-fruit"):
        p = load_profile(name)
        assert p.unit == "fruit" and 5 <= p.per_sample[0] <= p.per_sample[1] <= 30


def _data(name="wine-grapes"):
    from importlib import resources

    ref = resources.files("fieldplan") / "data" / "profiles" / f"{name}.toml"
    return tomllib.loads(ref.read_text())


def test_user_file_is_loaded(tmp_path):
    data = _data()
    text = (
        "schema = 1\nname = 'my-pinot'\ntitle = 'Pinot'\nbasis = 'our winery'\nunit = 'berry'\n"
        "per_sample = [150, 150]\nper_plant = [2, 3]\nskip_end_plants = 3\nskip_border_rows = 2\n"
        "sides = 'one'\nexposure = ['shade']\nheights = ['middle']\nhandling = 'cool box'\n"
        "steps = ['take berries']\n"
    )
    path = tmp_path / "pinot.toml"
    path.write_text(text)
    p = load_profile(path)
    assert p.name == "my-pinot" and p.per_sample == (150, 150) and p.units_text == "150 berries"
    # The shipped profile has every required key, plus the optional row layout keys.
    optional = {"crops", "row_spacing_m", "plant_spacing_m", "spacing_basis"}
    assert set(data) - optional == set(tomllib.loads(text))
    assert p.row_spacing_m is None and p.crops == ()


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"per_sample": [200, 100]}, "per_sample"),
        ({"per_sample": [0, 10]}, "per_sample"),
        ({"per_plant": "3"}, "per_plant"),
        ({"sides": "left"}, "sides must be one of both, one"),
        ({"skip_end_plants": -1}, "skip_end_plants"),
        ({"steps": []}, "steps"),
        ({"colour": "red"}, "unknown key"),
        ({"schema": 2}, "schema"),
        ({"unit": ""}, "unit"),
    ],
)
def test_invalid_profiles_name_the_key(change, message):
    data = {**_data(), **change}
    with pytest.raises(InputError, match=message):
        parse_profile(data, source="mine.toml")


def test_missing_key_and_bad_files(tmp_path):
    data = _data()
    del data["per_sample"]
    with pytest.raises(InputError, match=r"missing key\(s\) \['per_sample'\]"):
        parse_profile(data, source="x.toml")
    broken = tmp_path / "broken.toml"
    broken.write_text("name = [")
    with pytest.raises(InputError, match="broken.toml.*TOML"):
        load_profile(broken)
    with pytest.raises(InputError, match="neither a shipped profile"):
        load_profile("kiwi-fruit")


def test_ripeness_plan_carries_instructions():
    plan = make_plan(
        blocks_frame({"A": square, "B": shapely.affinity.translate(square, 500)}), spacing=80, seed=2
    )
    ripe = apply_purpose(plan, purpose="ripeness", crop_profile="table-grapes")
    assert (ripe.points["per_sample"] == "100-150 berries").all()
    assert ripe.points["instructions"].str.contains("border row").all()
    assert ripe.params["crop_profile"] == "table-grapes" and "cores" not in ripe.layers
    assert ripe.points["sample_id"].is_unique and (ripe.points["depth_cm"] == "").all()


def test_cluster_design_keeps_its_units_and_instructions():
    from fieldplan.demo import demo_blocks_path
    from fieldplan.read import read_blocks

    blocks = read_blocks(demo_blocks_path())
    vines = blocks[blocks["block"].isin(["V01", "V02"])].reset_index(drop=True)
    options = {"per_block": 3, "units_per_cluster": 5}
    plan = make_plan(
        vines, design="clusters", design_options=options, seed=1, samples={"purpose": "ripeness"}
    )
    assert (plan.points["units"] == 5).all()
    text = plan.points["instructions"]
    assert text.str.startswith("Start at row").all()
    expected = load_profile("wine-grapes").instructions_for(plants=5, skip_end_plants=0, skip_border_rows=0)
    assert text.str.endswith(expected).all()
    assert (plan.points["per_sample"] == "100-200 berries").all()


def test_cluster_instructions_follow_the_effective_options():
    # The plan's own --skip-row-ends/--skip-border-rows are what the design left out,
    # so the text must say those numbers, not the crop profile's (wine-grapes: 2 and 1).
    from fieldplan.demo import demo_blocks_path
    from fieldplan.read import read_blocks

    blocks = read_blocks(demo_blocks_path())
    vines = blocks[blocks["block"].isin(["V01", "V02"])].reset_index(drop=True)
    options = {"per_block": 3, "units_per_cluster": 5, "skip_row_ends": 3}
    plan = make_plan(
        vines, design="clusters", design_options=options, seed=1, samples={"purpose": "ripeness"}
    )
    text = plan.points["instructions"]
    assert text.str.contains("skip 3 end plant(s) per row and 0 border row(s)", regex=False).all()
    assert not text.str.contains("skip 2 end plant", regex=False).any()
    notes = " ".join(plan.meta["notes"])
    assert "--skip-row-ends 3 --skip-border-rows 1" in notes
    assert "outside the profile's 1-3 per plant" in notes


@pytest.mark.parametrize("name", SHIPPED)
@pytest.mark.parametrize("plants", [1, 3, 5, 7, 12, 30, 34, 80, 150, 199, 200, 250])
def test_per_plant_amount_lands_the_sample_in_the_profile_range(name, plants):
    # reference: the profile's own per_sample range (common practice, no source): taking
    # `a` units from each of `k` plants gives k*a units, which must lie in [fewest, most]
    # whenever whole numbers allow; otherwise the amount is flagged as not following it.
    p = load_profile(name)
    lo, hi, follows = p.per_plant_for(plants)
    s_lo, s_hi = p.per_sample
    feasible = -(-s_lo // plants) <= s_hi // plants
    if feasible:
        assert s_lo <= plants * lo <= plants * hi <= s_hi
    else:
        # some plants give one unit more than others: the total can still land in range
        assert plants * lo <= s_hi and plants * hi >= s_lo or s_hi < plants
    if follows:
        assert p.per_plant[0] <= lo <= hi <= p.per_plant[1]
        assert p.cluster_warning(plants) == ""
    else:
        assert "outside the profile" in p.cluster_warning(plants)
    text = p.instructions_for(plants=plants, skip_end_plants=4, skip_border_rows=2)
    assert f"from each of the {plants} plant(s)" in text
    assert "skip 4 end plant(s) per row and 2 border row(s)" in text


def test_cluster_of_wine_grape_vines_per_plant_amounts():
    # reference: arithmetic on the profile's 100-200 berries (common practice, no source):
    # 5 vines need 20-40 berries each; 80 vines fit the profile's 1-3 per plant at 2 each
    # (160 berries); 250 vines at one berry each give 250 > 200.
    p = load_profile("wine-grapes")
    assert p.per_plant_for(5) == (20, 40, False)
    assert p.per_plant_for(80) == (2, 2, True)
    assert p.per_plant_for(50) == (2, 3, True)
    assert p.per_plant_for(250) == (1, 1, False)


def test_ripeness_notes_points_in_border_rows_and_row_ends():
    # common practice, no source: border rows and row-end plants are not sampled.
    blocks = blocks_frame({"A": square}, row_spacing_m=[2.5], plant_spacing_m=[1.2])
    plan = make_plan(blocks, spacing=7, seed=3, samples={"purpose": "ripeness"})
    strip = max(1 * 2.5, 2 * 1.2)  # wine-grapes: 1 border row, 2 end plants
    # reference: shapely (GEOS) point-to-boundary distance.
    near = int((shapely.distance(plan.points.geometry.values, square.exterior) < strip).sum())
    assert near > 0
    assert f"ripeness: {near} point(s) within 2.5 m of the edge" in plan.blocks["flags"].iloc[0]
    buffered = make_plan(blocks, spacing=7, seed=3, edge_buffer=2.5, samples={"purpose": "ripeness"})
    assert "ripeness" not in buffered.blocks["flags"].iloc[0]
