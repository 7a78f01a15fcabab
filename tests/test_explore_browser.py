"""explore()'s map drawn in headless Chromium: every block and point on the page, offline."""

from __future__ import annotations

import pytest

from tests.test_browser import CHROMIUM, _open

pytestmark = pytest.mark.browser


def test_explore_map_draws_every_block_and_point(tmp_path):
    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium (apt-get install -y chromium)")
    from playwright.sync_api import sync_playwright

    import fieldplan
    from fieldplan.demo import make_demo_plan

    plan = make_demo_plan()
    path = tmp_path / "explore.html"
    fieldplan.explore(plan, offline=True).save(path)
    with sync_playwright() as pw:
        context, page, log = _open(pw, path, tmp_path / "profile")
        try:
            # common practice, no source: an offline page makes no request beyond file://
            assert log["requests"] == [] and log["errors"] == []
            assert page.locator(".fp-point").count() == len(plan.points)
            labels = page.locator(".fp-block-label").all_text_contents()
            assert sorted(t for t in labels) == sorted(
                f"{b}{v}" for b, v in zip(plan.blocks["block"], plan.blocks["variety"], strict=True)
            )
            assert page.evaluate("fieldplanLayers.blocks.getLayers().length") == len(plan.blocks)
            n_paths = page.locator(".leaflet-overlay-pane path.leaflet-interactive").count()
            assert n_paths == len(plan.blocks) + len(plan.exclusions)
            assert page.locator(".fp-legend").count() == 1 and page.locator(".fp-panel h2").count() == 2
        finally:
            context.close()
