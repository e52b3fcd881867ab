"""Size and load time of the explorer page; prints one JSON object.

Writes the page (``tiltopt explore``'s default: plotly inside, the detail of the few designs the page
holds) of a synthetic 10,000-design front (``tests/helpers.py make_big_front``: a short real run whose
front is replaced by 10,000 assembling designs, with 20,000 infeasible evaluations) or of the run
folders given with ``--run``, then opens it in headless Chromium (Debian's /usr/bin/chromium through
playwright) ``--repeat`` times and reports:

* ``front_designs``, ``evaluations``: of the runs shown;
* ``page_bytes`` / ``page_mb``: the page file; ``write_s``: writing it;
* ``interactive_s`` (median of the repeats, each a fresh page; ``interactive_s_all``): from navigation
  to the page's ``window.tiltoptExplorer.ready`` (the data parsed, the scatter matrix drawn, clicks
  answered), measured in the page (``performance.now()``, navigation start = 0);
* ``detail_open_ms``: opening the detail of a design the page holds (drawing, curves, tables);
* ``targets``: 10 MB and 3 s for a 10,000-design front (issue 11), and ``meets_targets``.

Run ``python benchmarks/explorer_page.py`` (the 10,000-design front) or
``python benchmarks/explorer_page.py --run results/<run-id>`` (for example the demo's run folder).
"""
from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--no-first-run"]
READY = "window.tiltoptExplorer !== undefined && window.tiltoptExplorer.ready === true"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--run", action="append", default=[], help="run folder(s) to show instead of the synthetic front")
    ap.add_argument("--designs", type=int, default=10_000, help="designs of the synthetic front")
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()

    from playwright.sync_api import sync_playwright

    from tiltopt.optimizer.results import load_run
    from tiltopt.reports.runs import explore_runs

    with tempfile.TemporaryDirectory() as tmp:
        if a.run:
            dirs = [Path(d) for d in a.run]
        else:
            from tests.helpers import make_big_front

            dirs = [make_big_front(Path(tmp) / "big", n=a.designs)]
        runs = [load_run(d) for d in dirs]
        n_front = sum(len(r.front) for r in runs)
        n_eval = sum(len(r.evaluations) for r in runs if r.evaluations is not None)
        page = Path(tmp) / "explorer.html"
        t0 = time.perf_counter()
        explore_runs(dirs, page, runs=runs)
        write_s = time.perf_counter() - t0
        size = page.stat().st_size
        times, detail = [], []
        with sync_playwright() as p:
            b = p.chromium.launch(executable_path="/usr/bin/chromium", args=ARGS)
            try:
                for _ in range(a.repeat):
                    pg = b.new_page(viewport={"width": 1400, "height": 900})
                    errors = []
                    pg.on("pageerror", lambda e, errors=errors: errors.append(str(e)))
                    pg.goto(page.as_uri(), wait_until="commit", timeout=120_000)
                    pg.wait_for_function(READY, timeout=120_000, polling=20)
                    times.append(pg.evaluate("window.tiltoptExplorer.readyAt") / 1000.0)
                    held = pg.evaluate("Object.keys(window.tiltoptExplorer.data.detail).map(Number)")
                    if held:
                        ms = pg.evaluate(f"""() => {{ const t = performance.now();
                            window.tiltoptExplorer.openDetail({held[0]}); return performance.now() - t; }}""")
                        detail.append(ms)
                    if errors:
                        raise SystemExit(f"page errors: {errors}")
                    pg.close()
            finally:
                b.close()
    inter = statistics.median(times)
    out = {"front_designs": int(n_front), "evaluations": int(n_eval), "runs": [str(d) for d in a.run] or "synthetic",
           "page_bytes": int(size), "page_mb": round(size / 1e6, 2), "write_s": round(write_s, 2),
           "interactive_s": round(inter, 2), "interactive_s_all": [round(t, 2) for t in times],
           "detail_open_ms": round(statistics.median(detail), 1) if detail else None,
           "targets": {"page_mb": 10.0, "interactive_s": 3.0, "for_front_designs": 10_000},
           "meets_targets": bool(size < 10e6 and inter < 3.0)}
    print(json.dumps(out))


if __name__ == "__main__":
    main()
