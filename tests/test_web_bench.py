"""The web benchmark on tiny sizes, so it keeps running; no timing is asserted here."""

from __future__ import annotations

import pytest

pytest.importorskip("fastapi")
pytest.importorskip("uvicorn")


def test_web_benchmark_smoke(tmp_path):
    from benchmarks import web_bench

    figures = web_bench.study(smoke=True)
    # Every page load answered 200, alone and with concurrent clients.
    assert figures["home"]["errors"] == 0 and figures["plan_page"]["errors"] == 0
    assert figures["concurrent"]["errors"] == 0
    assert figures["concurrent"]["page_loads"] == figures["concurrent"]["clients"] * 2
    # The demo preview plans the demo's grid: 14 blocks.
    assert figures["preview_demo"]["blocks"] == 14 and figures["preview_demo"]["points"] > 0
    assert figures["preview_1000"]["blocks"] == 20
    text = web_bench.markdown(figures, [0.0, 0.0])
    assert "| home page, median |" in text
    assert [v[0] for v in web_bench.verdicts(figures)] == [
        "home",
        "plan_page",
        "plan_page_uncached",
        "preview_demo",
        "preview_1000",
        "concurrent",
    ]
