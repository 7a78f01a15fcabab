"""The web workspace under load, against 127.0.0.1 only: page latency, previews, concurrent clients.

``python -m benchmarks.web_bench`` (run by ``make bench``) serves a copy of the demo
workspace with uvicorn on a free port of 127.0.0.1 and measures, over real HTTP:

- home page and plan page (its HTML and the JSON it loads), warm, median and 95th
  percentile of repeated requests (target 0.2 s);
- preview of the 14-block demo estate and of a 1,000-block file: upload, then the
  preview job until its points are ready (targets 1 s and 3 s);
- 20 concurrent clients each loading the plan page (HTML + data) a bounded number of
  times: errors (target 0) and latency.

Unlike the other studies these figures are absolute times, as the targets are: they
depend on the machine and its load (the load average is recorded with them).
Results go to ``benchmarks/web_results.md`` and ``web_results.json``; ``--smoke``
runs tiny sizes and writes nothing (``tests/test_web_bench.py``).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import socket
import statistics
import sys
import tempfile
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

__all__ = ["study", "main", "demo_workspace", "LiveServer"]

HERE = Path(__file__).resolve().parent
MAX_CLIENTS = 20  # bounded: never more than this many at once
TARGETS = {
    "home": 0.2,
    "plan_page": 0.2,
    "plan_page_uncached": 0.2,
    "preview_demo": 1.0,
    "preview_1000": 3.0,
    "concurrent_errors": 0,
}


class LiveServer:
    """uvicorn on 127.0.0.1 (a free port) in a thread; nothing else is ever contacted."""

    def __init__(self, workspace: Path) -> None:
        import uvicorn

        from fieldplan.web.app import create_app

        # The socket is bound here and handed to uvicorn: no other process can take the port between.
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.port = self.sock.getsockname()[1]
        config = uvicorn.Config(create_app(workspace), host="127.0.0.1", port=self.port, log_level="warning")
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(target=self.server.run, kwargs={"sockets": [self.sock]}, daemon=True)
        self.thread.start()
        end = time.monotonic() + 30
        while not self.server.started:
            if time.monotonic() > end:
                raise RuntimeError("server did not start")
            time.sleep(0.05)
        self.base = f"http://127.0.0.1:{self.port}"

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=10)
        self.sock.close()


def demo_workspace(root: Path) -> Path:
    """The demo workspace as ``make demo`` builds it (plan with crews, two result rounds; soil)."""
    from typer.testing import CliRunner

    from fieldplan.cli.main import app
    from fieldplan.demo import demo_blocks_path, demo_exclusions_path

    runner = CliRunner()
    demo_dir = HERE.parent / "demo_plots"
    steps = [
        ["demo", "--out", str(root / "plan"), "--force", "-q"],
        ["crews", str(root / "plan"), "--crews", "3", "--drop-off", "18.89605,-33.86014", "--return", "--force", "-q"],
        ["results", str(root / "plan"), str(demo_dir / "results_round1.csv"), "-q"],
        ["results", str(root / "plan"), str(demo_dir / "results_round2.csv"), "-q"],
        ["estimate", str(root / "plan"), "--variable", "brix", "--target", "23", "-q"],
        ["plan", str(demo_blocks_path()), "--exclude", str(demo_exclusions_path()), "--spacing", "100",
         "--purpose", "soil", "--seed", "7", "--out", str(root / "soil"), "-q"],
    ]  # fmt: skip
    for args in steps:
        result = runner.invoke(app, args)
        if result.exit_code not in (0,) and args[0] != "results":
            raise RuntimeError(f"fieldplan {' '.join(args)} failed: {result.output}")
    return root


def _timed(client, method: str, url: str, **kw) -> tuple[float, int]:
    t0 = time.perf_counter()
    r = client.request(method, url, **kw)
    return time.perf_counter() - t0, r.status_code


def _stats(times: list[float]) -> dict:
    ordered = sorted(times)
    p95 = ordered[min(len(ordered) - 1, int(round(0.95 * (len(ordered) - 1))))]
    return {
        "median_s": round(statistics.median(ordered), 4),
        "p95_s": round(p95, 4),
        "best_s": round(ordered[0], 4),
        "n": len(ordered),
    }


def _page_load(client, name: str) -> tuple[float, bool]:
    """The plan page as a browser loads it: the HTML, then the JSON its script fetches."""
    t0 = time.perf_counter()
    a = client.get(f"/plans/{name}")
    b = client.get(f"/api/plans/{name}")
    return time.perf_counter() - t0, a.status_code == 200 and b.status_code == 200


def _forget_plans() -> None:
    """Drop the server's cached plan pages (it runs in this process), as a change to the plan does."""
    from fieldplan.web import api, service

    api._DETAILS.clear()
    service._CACHE.clear()


def _preview(client, blocks: Path, params: dict, seed: int) -> tuple[float, dict]:
    """Upload a block file and wait for its preview; seconds from the first byte sent to the points."""
    t0 = time.perf_counter()
    r = client.post("/api/uploads", files={"file": (blocks.name, blocks.read_bytes())})
    r.raise_for_status()
    body = {"upload": r.json()["upload"], "params": params, "seed": seed}
    job = client.post("/api/previews", json=body).json()["job"]
    while True:
        state = client.get(f"/api/jobs/{job}").json()
        if state["status"] in ("done", "failed"):
            break
        time.sleep(0.02)
    seconds = time.perf_counter() - t0
    if state["status"] != "done":
        raise RuntimeError(f"preview failed: {state['error']}")
    return seconds, {"points": state["result"]["points"], "blocks": state["result"]["blocks"]}


def study(*, smoke: bool = False) -> dict:
    """Run every measurement; returns the figures (``smoke``: tiny counts, no targets judged)."""
    import httpx

    from benchmarks.workloads import estate, write_geojson
    from fieldplan.demo import demo_blocks_path

    repeat = 3 if smoke else 30
    clients = 3 if smoke else MAX_CLIENTS
    per_client = 2 if smoke else 10
    big_blocks = 20 if smoke else 1000
    figures: dict = {"smoke": smoke}
    with tempfile.TemporaryDirectory(prefix="fieldplan-web-bench-") as tmp:
        tmp = Path(tmp)
        ws = demo_workspace(tmp / "ws")
        big = write_geojson(estate(big_blocks, seed=5), tmp / f"estate_{big_blocks}.geojson")
        server = LiveServer(ws)
        try:
            with httpx.Client(base_url=server.base, timeout=120.0) as client:
                client.headers["X-CSRF-Token"] = client.get("/api/session").json()["csrf"]
                # Warm: the first visit of each page imports the map and estimate code.
                client.get("/")
                _page_load(client, "plan")
                home = [_timed(client, "GET", "/") for _ in range(repeat)]
                figures["home"] = {**_stats([t for t, _ in home]), "errors": sum(s != 200 for _, s in home)}
                loads = [_page_load(client, "plan") for _ in range(repeat)]
                figures["plan_page"] = {
                    **_stats([t for t, _ in loads]),
                    "errors": sum(not ok for _, ok in loads),
                }
                html = [_timed(client, "GET", "/plans/plan")[0] for _ in range(repeat)]
                figures["plan_page_html"] = _stats(html)
                # The first view after a change: nothing of the plan cached (read from plan.gpkg again).
                cold = []
                for _ in range(max(3, repeat // 3)):
                    _forget_plans()
                    cold.append(_page_load(client, "plan")[0])
                figures["plan_page_uncached"] = _stats(cold)

                demo_params = {"spacing": 40, "edge_buffer": 8}
                _preview(client, demo_blocks_path(), demo_params, seed=100)  # warm the planner
                runs = [
                    _preview(client, demo_blocks_path(), demo_params, seed=101 + i)
                    for i in range(2 if smoke else 5)
                ]
                figures["preview_demo"] = {
                    **_stats([t for t, _ in runs]),
                    **runs[0][1],
                    "params": demo_params,
                }
                big_params = {"spacing": 150}
                runs = [_preview(client, big, big_params, seed=201 + i) for i in range(1 if smoke else 3)]
                figures["preview_1000"] = {**_stats([t for t, _ in runs]), **runs[0][1], "params": big_params}

            def one_client(_):
                times, errors = [], 0
                with httpx.Client(base_url=server.base, timeout=60.0) as c:
                    for _ in range(per_client):
                        t, ok = _page_load(c, "plan")
                        times.append(t)
                        errors += 0 if ok else 1
                return times, errors

            t0 = time.perf_counter()
            with ThreadPoolExecutor(max_workers=clients) as pool:
                outcomes = list(pool.map(one_client, range(clients)))
            wall = time.perf_counter() - t0
            times = [t for ts, _ in outcomes for t in ts]
            figures["concurrent"] = {
                **_stats(times),
                "clients": clients,
                "page_loads": len(times),
                "errors": sum(e for _, e in outcomes),
                "wall_s": round(wall, 2),
                "page_loads_per_s": round(len(times) / wall, 1),
            }
        finally:
            server.stop()
    return figures


def verdicts(figures: dict) -> list[tuple[str, str, float, float, bool]]:
    """(name, measure, value, target, passed) for each target."""
    out = []
    for key, label in (
        ("home", "home page, median"),
        ("plan_page", "plan page (HTML + data), median"),
        ("plan_page_uncached", "plan page after a change (nothing cached), median"),
    ):
        v = figures[key]["median_s"]
        out.append((key, label, v, TARGETS[key], v <= TARGETS[key]))
    for key, label in (
        ("preview_demo", "preview, 14-block demo, median"),
        ("preview_1000", "preview, 1,000 blocks, median"),
    ):
        v = figures[key]["median_s"]
        out.append((key, label, v, TARGETS[key], v <= TARGETS[key]))
    v = figures["concurrent"]["errors"]
    out.append(("concurrent", f"errors, {figures['concurrent']['clients']} concurrent clients", v, 0, v == 0))
    return out


def markdown(figures: dict, load: list[float]) -> str:
    lines = [
        "# Web workspace benchmarks",
        "",
        "Absolute times over HTTP to a server on 127.0.0.1 (uvicorn, one process), measured by",
        "`python -m benchmarks.web_bench`; they depend on the machine and its load.",
        "",
        f"Machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}; "
        f"load average (1 min) at start and end: {load[0]:.2f}, {load[1]:.2f}.",
        "",
        "| measure | value | target | result |",
        "| --- | ---: | ---: | --- |",
    ]
    for key, label, value, target, passed in verdicts(figures):
        unit = "" if key == "concurrent" else " s"
        lines.append(
            f"| {label} | {value:g}{unit} | ≤ {target:g}{unit} | {'pass' if passed else '**miss**'} |"
        )
    lines += ["", "## Details", ""]
    for key, value in figures.items():
        if isinstance(value, dict):
            lines.append(f"- **{key}**: " + json.dumps(value, sort_keys=True))
    lines.append("")
    return "\n".join(lines)


def main(argv: list[str] | None = None, *, smoke: bool | None = None) -> int:
    ap = argparse.ArgumentParser(description="Benchmark the web workspace on 127.0.0.1.")
    ap.add_argument("--smoke", action="store_true", help="tiny sizes; writes nothing unless --out is given")
    ap.add_argument("--out", type=Path, help="folder for web_results.md/json (default: benchmarks/)")
    args = ap.parse_args(argv)
    smoke = args.smoke if smoke is None else smoke
    load = [os.getloadavg()[0]]
    figures = study(smoke=smoke)
    load.append(os.getloadavg()[0])
    text = markdown(figures, load)
    print(text)
    out = args.out if args.out is not None else (None if smoke else HERE)
    if out is not None:
        out.mkdir(parents=True, exist_ok=True)
        (out / "web_results.md").write_text(text, encoding="utf-8")
        payload = {"figures": figures, "load_average": load, "targets": TARGETS}
        (out / "web_results.json").write_text(
            json.dumps(payload, indent=2, sort_keys=True) + "\n", encoding="utf-8"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
