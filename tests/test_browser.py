"""The explorer page in a real browser: headless Chromium (system package) driven by Playwright.

Skips, saying why, only where no browser can be had (no Chromium binary, or one that does not start); the
playwright package is a test dependency.
"""
from __future__ import annotations

import os
import re
import shutil
import threading

import numpy as np
import pytest

from tests.helpers import fixture_run

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]
READY = "window.tiltoptExplorer !== undefined && window.tiltoptExplorer.ready === true"


def _chromium() -> str | None:
    for p in (os.environ.get("TILTOPT_CHROMIUM"), "/usr/bin/chromium", shutil.which("chromium"),
              shutil.which("chromium-browser")):
        if p and os.path.exists(p):
            return p
    return None


@pytest.fixture(scope="module")
def browser():
    from playwright import sync_api  # a test dependency (the [test] extra), so never a reason to skip

    exe = _chromium()
    if exe is None:
        pytest.skip("no Chromium binary (install the Debian package 'chromium'); browser tests skipped")
    with sync_api.sync_playwright() as p:
        try:
            b = p.chromium.launch(executable_path=exe, args=ARGS)
        except Exception as exc:  # a browser that cannot start here is "no browser to be had"
            pytest.skip(f"Chromium at {exe} does not start: {exc}")
        yield b
        b.close()


def _open(browser, url, viewport=(1400, 900)):
    """A new page on ``url`` (a path or an http address) with its console errors and requests collected."""
    pg = browser.new_page(viewport={"width": viewport[0], "height": viewport[1]})
    errors, requests = [], []
    pg.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    pg.on("pageerror", lambda e: errors.append(str(e)))
    pg.on("request", lambda r: requests.append(r.url))
    pg.goto(url if isinstance(url, str) else url.as_uri())
    pg.wait_for_function(READY, timeout=60000)
    pg.wait_for_selector("#matrix .main-svg")
    return pg, errors, requests


def _trace(pg, name):
    return pg.evaluate(f"document.getElementById('matrix')._fullData.find((t) => t.name === {name!r}) || null")


@pytest.fixture(scope="module")
def page(browser, tmp_path_factory):
    from tests.helpers import make_tiny_run
    from tiltopt.optimizer.results import load_run
    from tiltopt.reports.runs import explore_runs

    folder = tmp_path_factory.mktemp("page")
    run_dir = make_tiny_run(folder)               # a real tiny run of the optimiser
    front = load_run(run_dir).front.reset_index(drop=True)
    path = explore_runs([run_dir], folder / "explorer.html", detail_limit=1000)
    front.attrs["sheet_dir"] = str(run_dir)
    pg, errors, requests = _open(browser, path)
    yield pg, errors, requests, front
    pg.close()


def test_loads_without_errors_or_network(page):
    pg, errors, requests, front = page
    assert errors == []
    # offline: the page asks for nothing but itself (file: and data: URLs)
    assert all(u.startswith(("file:", "data:", "blob:")) for u in requests), requests
    assert pg.locator("#safety").inner_text().startswith("Caution")


# the page pixel of the most isolated design of the 'designs' trace, and its row: (x, y, row)
_ISOLATED_POINT = """() => {
    const gd = document.getElementById('matrix');
    const E = window.tiltoptExplorer;
    const k0 = E.curves.designs;
    const t = gd._fullData[k0];
    const r = gd.getBoundingClientRect();
    let xa, ya, xs, ys;
    if (t.type === 'splom') {
        xa = gd._fullLayout[t.xaxes[0].replace('x', 'xaxis')];
        ya = gd._fullLayout[t.yaxes[1].replace('y', 'yaxis')];
        xs = t.dimensions[0].values; ys = t.dimensions[1].values;
    } else {
        xa = gd._fullLayout.xaxis;
        ya = gd._fullLayout[t.yaxis.replace('y', 'yaxis')];
        xs = t.x; ys = t.y;
    }
    const px = xs.map((v, k) => [r.left + xa._offset + xa.l2p(v), r.top + ya._offset + ya.l2p(ys[k])]);
    let best = -1, far = -1;
    px.forEach((p, k) => {
        let near = Infinity;
        px.forEach((q, j) => { if (j !== k) near = Math.min(near, Math.hypot(p[0] - q[0], p[1] - q[1])); });
        if (near > far) { far = near; best = k; }
    });
    return [px[best][0], px[best][1], E.traceRows[k0][best]];
}"""


def test_click_opens_the_candidate_detail(page):
    pg, errors, requests, front = page
    x, y, row = pg.evaluate(_ISOLATED_POINT)
    pg.mouse.move(x, y)
    pg.wait_for_timeout(200)
    pg.mouse.click(x, y)
    pg.wait_for_selector("#detail:not([hidden]) #drawings svg .wheel", timeout=10000)
    cid = pg.evaluate(f"window.tiltoptExplorer.data.ids[{row}]")
    assert pg.locator("#detail-id").inner_text() == cid
    assert pg.locator("#sheet-cmd").inner_text() == f"tiltopt sheet {front.attrs['sheet_dir']} --candidate {cid}"
    assert pg.locator("#drawings svg .wheel").count() == 2
    # the drawing has a scale bar and a legend of its colours
    assert pg.locator("#drawings svg .scalebar").count() == 1 and pg.locator("#drawings svg .legend .key").count() >= 4
    assert errors == []


def test_slider_changes_the_drawing(page):
    pg, errors, requests, front = page
    if pg.locator("#detail").get_attribute("hidden") is not None:
        pg.evaluate("window.tiltoptExplorer.openDetail(0)")
    pg.wait_for_selector("#drawings svg .wheel")
    before = pg.locator("#drawings svg .wheel").first.get_attribute("points")
    lean0 = pg.locator("#drawings svg").get_attribute("data-lean")
    leans = pg.evaluate("window.tiltoptExplorer.data.runs[0].lean_deg")
    k = len(leans) - 2
    pg.locator("#lean-slider").fill(str(k))
    after = pg.locator("#drawings svg .wheel").first.get_attribute("points")
    assert pg.locator("#drawings svg").get_attribute("data-lean") != lean0
    assert float(pg.locator("#drawings svg").get_attribute("data-lean")) == pytest.approx(leans[k])
    assert after != before
    assert f"{leans[k]:.1f} deg" in pg.locator("#lean-value").inner_text()
    pg.locator("#travel-select").select_option("2")
    assert float(pg.locator("#drawings svg").get_attribute("data-travel")) == pytest.approx(30.0)
    assert errors == []


def test_gap_labels_are_the_readout_and_the_marks(page):
    """Every red label of the drawing is the figure of the readout beside it (the same mark), with its unit;
    and both are the marks the detail holds (tiltopt/reports/marks.py, held to shapely in tests/test_marks.py)."""
    pg, errors, requests, front = page
    pg.evaluate("window.tiltoptExplorer.openDetail(1)")
    pg.wait_for_selector("#detail[data-candidate] #drawings svg .mark")
    pg.locator("#lean-slider").fill("6")
    labels = pg.evaluate("""() => [...document.querySelectorAll('#drawings svg .mark')].map((g) =>
        [g.dataset.kind, g.dataset.wheel === undefined ? null : Number(g.dataset.wheel), Number(g.dataset.mm),
         g.querySelector('text').textContent])""")
    assert labels
    det = pg.evaluate("window.tiltoptExplorer.getDetail(1)")
    t = pg.evaluate("window.tiltoptExplorer.state.travel")
    marks = [m for m in det["marks"][t][6] if m["kind"] not in ("pair", "tubes") or m["mm"] < 150.0]
    assert [(k, w, v) for k, w, v, _ in labels] == [(m["kind"], m["wheel"], m["mm"]) for m in marks]
    for kind, wheel, v, text in labels:
        assert text == (f"{v:.1f} mm" if v >= 0 else f"overlap {-v:.1f} mm")
        sel = f'#state-readout .drawn[data-kind="{kind}"]' + ("" if wheel is None else f'[data-wheel="{wheel}"]')
        assert pg.locator(sel).inner_text() == text
    assert errors == []


def test_colour_by_selector(page):
    pg, errors, requests, front = page
    var = [c for c in front.columns if c.startswith("var.")][-1]
    pg.locator("#colour-by").select_option(var)
    colours = _trace(pg, "designs")["marker"]["color"]
    feas = front[front["feasible"].astype(bool)]
    assert colours == pytest.approx(feas[var].tolist(), rel=1e-6)     # float32 columns
    assert var[4:].replace("_", " ") + " [mm]" in pg.locator("#colour-key").inner_text()
    pg.locator("#colour-by").select_option("__run")
    assert _trace(pg, "designs")["marker"]["color"] == [0] * len(feas)
    # infeasible designs on demand, grey
    pg.locator("#show-infeasible").check()
    inf = _trace(pg, "infeasible")
    assert inf is not None and inf["marker"]["color"] == "#b4b9be"
    pg.locator("#view-parallel").click()
    pg.wait_for_selector("#parallel .main-svg")
    n_dims = pg.evaluate("document.getElementById('parallel')._fullData[0].dimensions.length")
    assert n_dims >= len([c for c in front.columns if c.startswith("obj.")])
    pg.locator("#view-matrix").click()
    pg.locator("#show-infeasible").uncheck()
    assert errors == []


def test_page_compromise_is_the_python_one(page):
    """With the run config's targets (none here) and after a filter, the page's best compromise is the design
    tiltopt.optimizer.selection.best_compromise picks from the same values (the page's float32 columns)."""
    import pandas as pd

    from tiltopt.optimizer.selection import Bound, best_compromise

    pg, errors, requests, front = page
    f32 = front.copy()
    for c in [c for c in front.columns if c.startswith(("obj.", "var.")) or c.endswith("_mm")]:
        if pd.api.types.is_float_dtype(front[c]):
            f32[c] = front[c].astype(np.float32).astype(float)
    assert pg.locator("#compromise-id").inner_text() == best_compromise(f32).candidate_id
    hi = float(np.median(f32["obj.max_scrub"]))
    pg.evaluate(f"window.tiltoptExplorer.setFilter('obj.max_scrub', null, {hi!r})")
    want = best_compromise(f32, [Bound("max_scrub", None, hi)]).candidate_id
    assert pg.locator("#compromise-id").inner_text() == want
    pg.evaluate("window.tiltoptExplorer.setFilter('obj.max_scrub', null, null)")
    assert errors == []


@pytest.mark.parametrize("paper, width_mm", [("A4", 210.0), ("Letter", 215.9)])
def test_sheet_prints_within_the_paper_width(page, tmp_path, paper, width_mm):
    """Print-emulated, the sheet fits the printable width of A4 and of letter paper (page margins 11 mm each
    side, from the sheet's own @page rule); and the browser's PDF of it has pages of that paper size."""
    from tests.helpers import LEAN_LIMIT, TRAVEL, fixture_run
    from tiltopt.reports.sheet import SheetInputs, write_sheet

    pg, errors, requests, front = page
    run, mechs, fr, res = fixture_run()
    cid = str(fr["candidate_id"].iloc[0])
    paths = write_sheet(tmp_path, SheetInputs(mech=mechs[cid], candidate_id=cid, lean_limit_deg=LEAN_LIMIT,
                                              travel_mm=TRAVEL))
    px = (width_mm - 22.0) / 25.4 * 96.0           # CSS px per inch = 96 (CSS Values and Units, level 3)
    sheet = pg.context.browser.new_page(viewport={"width": int(px), "height": 1000})
    try:
        sheet.goto(paths["sheet"].as_uri())
        sheet.emulate_media(media="print")
        assert sheet.evaluate("document.documentElement.scrollWidth") <= int(px) + 1
        pdf = sheet.pdf(format=paper)
        box = re.search(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)", pdf)
        w_pt = float(box.group(1))
        assert w_pt == pytest.approx(width_mm / 25.4 * 72.0, abs=1.0)   # 72 pt per inch (PDF 1.7, 8.3.2.3)
    finally:
        sheet.close()


@pytest.mark.parametrize("n_obj, kinds", [(1, ["histogram", "scatter"]), (2, ["scatter"]), (3, ["splom"])])
def test_fronts_of_one_two_and_more_objectives_draw_without_errors(browser, tmp_path, n_obj, kinds):
    """One objective: a strip of the designs under their histogram; two: one scatter plot (plotly's scatter
    matrix fails on a single panel, and the page stayed blank); three or more: the matrix. Each draws every
    feasible front design, opens a design on a click and draws parallel coordinates, with no console error."""
    import dataclasses

    from tiltopt.reports.explorer import write_explorer

    run, mechs, front, res = fixture_run()
    drop = [c for c in front.columns if c.startswith("obj.")][n_obj:]
    run = dataclasses.replace(run, front=front.drop(columns=drop), evaluations=run.evaluations.drop(columns=drop))
    pg, errors, requests = _open(browser, write_explorer(tmp_path / "explorer.html", [run]))
    try:
        types = pg.evaluate("document.getElementById('matrix')._fullData.map((t) => t.type)")
        assert types[:len(kinds)] == kinds
        n_feasible = int(front["feasible"].astype(bool).sum())
        drawn = _trace(pg, "designs")
        values = drawn["x"] if drawn["type"] == "scatter" else drawn["dimensions"][0]["values"]
        assert len([v for v in values if v is not None]) == n_feasible
        x, y, row = pg.evaluate(_ISOLATED_POINT)
        pg.mouse.move(x, y)
        pg.wait_for_timeout(200)
        pg.mouse.click(x, y)
        pg.wait_for_selector("#detail:not([hidden])", timeout=5000)
        assert pg.locator("#detail-id").inner_text() == pg.evaluate(f"window.tiltoptExplorer.data.ids[{row}]")
        pg.locator("#view-parallel").click()
        pg.wait_for_selector("#parallel .main-svg")
        assert pg.evaluate("document.getElementById('parallel')._fullData[0].dimensions.length") >= n_obj
        assert errors == []
    finally:
        pg.close()


# ----------------------------------------------------------------- a 10,000-design front, served
@pytest.fixture(scope="module")
def served(browser, tmp_path_factory):
    """A 10,000-design front (tests/helpers.py make_big_front) written as a page and served as
    ``tiltopt explore --serve`` serves it (127.0.0.1, the detail of any design on request)."""
    from tests.helpers import make_big_front
    from tiltopt.commands.reports import make_server
    from tiltopt.reports.runs import explore_runs

    folder = tmp_path_factory.mktemp("big")
    run_dir = make_big_front(folder, n=10_000, n_infeasible=3000)
    made = []
    path = explore_runs([run_dir], folder / "explorer.html", explorer_out=made)
    httpd = make_server(path, 0, made[0])
    t = threading.Thread(target=httpd.serve_forever, daemon=True)
    t.start()
    origin = f"http://127.0.0.1:{httpd.server_address[1]}/"
    pg, errors, requests = _open(browser, origin + path.name)
    yield pg, errors, requests, origin, made[0]
    pg.close()
    httpd.shutdown()
    httpd.server_close()


def test_every_front_design_opens_its_detail(served):
    """50 designs drawn at random from the 10,000 (a third of them past the 5,000 a page once held at most)
    each open their drawing, curves and tables; the page holds few, so most are computed by the server."""
    pg, errors, requests, origin, ex = served
    n_front = int(ex.frames[0]["__front"].sum())
    assert n_front == 10_000
    rng = np.random.default_rng(11)
    rows = list(rng.choice(n_front, 34, replace=False)) + list(rng.choice(np.arange(5000, n_front), 16, replace=False))
    held = set(pg.evaluate("Object.keys(window.tiltoptExplorer.data.detail).map(Number)"))
    assert len(held) < 100 and any(int(r) not in held for r in rows)
    for r in rows:
        r = int(r)
        cid = pg.evaluate(f"window.tiltoptExplorer.data.ids[{r}]")
        pg.evaluate(f"window.tiltoptExplorer.openDetail({r})")
        pg.wait_for_function(f"document.getElementById('detail').dataset.candidate === {cid!r} && "
                             "document.querySelectorAll('#drawings svg .wheel').length === 2", timeout=30000)
        assert "scrub" in pg.locator("#state-readout").inner_text()
        assert pg.locator("#var-table tr").count() >= 5
        assert pg.evaluate("document.getElementById('curve-scrub')._fullData.length") >= 1
    assert errors == []
    detail_requests = [u for u in requests if "/detail/" in u]
    assert len(detail_requests) >= sum(int(r) not in held for r in rows)
    # no network: every request goes to the page's own server on 127.0.0.1 (or is the page's own data)
    outside = [u for u in requests if not u.startswith((origin, "data:", "blob:"))]
    assert outside == []


def test_a_filter_narrows_every_view(served):
    """A bound on an objective reduces the count shown; the matrix, the count, the parallel coordinates'
    brush and the best compromise all hold the same designs; brushing the parallel coordinates is the same filter."""
    pg, errors, requests, origin, ex = served
    pg.evaluate("window.tiltoptExplorer.setView('matrix')")
    # start from no filter at all (the page opens with the run's [targets], which may hold some designs back)
    pg.evaluate("document.getElementById('filter-clear').click()")
    n0 = int(pg.locator("#count-left").inner_text())
    assert n0 == 10_000
    vals = pg.evaluate("Array.from(window.tiltoptExplorer.values['obj.max_heave'].slice(0, 10000))")
    hi = float(np.quantile(vals, 0.3))
    pg.evaluate(f"window.tiltoptExplorer.setFilter('obj.max_heave', null, {hi!r})")
    expect = int(np.sum(np.asarray(vals) <= hi))
    n1 = int(pg.locator("#count-left").inner_text())
    assert n1 == expect < n0
    assert len(_trace(pg, "designs")["dimensions"][0]["values"]) == n1
    assert pg.evaluate("window.tiltoptExplorer.kept().length") == n1
    assert f"{n1} of 10000 front designs left" in pg.locator("#filter-count").inner_text()
    pg.locator("#view-parallel").click()
    pg.wait_for_selector("#parallel .main-svg")
    dims = pg.evaluate("document.getElementById('parallel')._fullData[0].dimensions"
                       ".map((d) => [d.label, d.constraintrange])")
    heave = [d for d in dims if d[0].startswith("max heave")][0]
    assert heave[1][1] == pytest.approx(hi, rel=1e-6)
    # brushing another axis of the parallel coordinates narrows the count and the matrix the same way
    k = [i for i, d in enumerate(dims) if d[0].startswith("overall width")][0]
    w = pg.evaluate("Array.from(window.tiltoptExplorer.values['obj.overall_width'].slice(0, 10000))")
    lo = float(np.quantile(w, 0.5))
    pg.evaluate(f"Plotly.restyle('parallel', {{['dimensions[{k}].constraintrange']: [[{lo!r}, {max(w) + 1!r}]]}})")
    pg.wait_for_timeout(300)
    both = int(np.sum((np.asarray(vals) <= hi) & (np.asarray(w) >= lo)))
    assert int(pg.locator("#count-left").inner_text()) == both < n1
    pg.locator("#view-matrix").click()
    assert len(_trace(pg, "designs")["dimensions"][0]["values"]) == both
    best = pg.evaluate("window.tiltoptExplorer.lastChoice().row")
    assert best in pg.evaluate("window.tiltoptExplorer.kept()")
    # the filter as a command line and as targets
    cmd = pg.locator("#export-cmd").inner_text()
    assert cmd.startswith("tiltopt shortlist ") and "--where \"max_heave_mm<=" in cmd and "overall_width_mm>=" in cmd
    assert "[targets]" in pg.locator("#export-toml").inner_text()
    pg.evaluate("document.getElementById('filter-clear').click()")
    assert int(pg.locator("#count-left").inner_text()) == n0
    assert errors == []


def test_compare_shows_the_chosen_designs(served):
    pg, errors, requests, origin, ex = served
    rows = [12, 6543, 9876]
    for r in rows:
        pg.evaluate(f"window.tiltoptExplorer.addCompare({r})")
    pg.evaluate("window.tiltoptExplorer.setView('compare')")
    pg.wait_for_function("document.querySelectorAll('#cmp-drawings .cmp-card svg .wheel').length === 6", timeout=30000)
    cards = pg.locator("#cmp-drawings .cmp-card").evaluate_all("(c) => c.map((x) => x.dataset.row)")
    assert [int(v) for v in cards] == rows
    ids = pg.evaluate(f"{rows}.map((r) => window.tiltoptExplorer.data.ids[r])")
    head = pg.locator("#cmp-table th").all_inner_texts()
    assert all(any(i in h for h in head) for i in ids)
    # drawn at the same lean and travel, and the same scale (one view box for every drawing)
    leans = pg.locator("#cmp-drawings svg.frontview").evaluate_all("(s) => s.map((x) => x.dataset.lean)")
    boxes = pg.locator("#cmp-drawings svg.frontview").evaluate_all("(s) => s.map((x) => x.getAttribute('viewBox'))")
    assert len(set(leans)) == 1 and len(set(boxes)) == 1
    assert pg.evaluate("document.getElementById('cmp-scrub')._fullData.length") == 3
    assert pg.locator("#cmp-table tr.differs").count() > 0
    pg.evaluate("window.tiltoptExplorer.setView('matrix')")
    assert errors == []


def test_layout_with_the_detail_open(served):
    """With the design panel open on a 1400 x 900 window the matrix keeps panels of a usable size; the panel
    can be docked below the plots (then the plots take the whole width) and widened."""
    pg, errors, requests, origin, ex = served
    pg.evaluate("window.tiltoptExplorer.setView('matrix')")
    pg.evaluate("window.tiltoptExplorer.openDetail(3)")
    pg.wait_for_selector("#detail:not([hidden]) #drawings svg .wheel", timeout=30000)
    pg.wait_for_timeout(400)
    panel = pg.evaluate("document.querySelector('#matrix .cartesianlayer .xy .bg, #matrix rect.bg') ? "
                        "document.getElementById('matrix')._fullLayout.xaxis._length : 0")
    assert panel >= 140, panel
    assert pg.locator("#detail").bounding_box()["width"] >= 400
    pg.locator("#detail-dock").click()
    pg.wait_for_timeout(400)
    plots = pg.locator("#plots").bounding_box()
    det = pg.locator("#detail").bounding_box()
    assert det["y"] >= plots["y"] + plots["height"] - 1 and plots["width"] >= 1000
    pg.locator("#detail-dock").click()
    pg.wait_for_timeout(200)
    sp = pg.locator("#splitter").bounding_box()
    w0 = pg.locator("#detail").bounding_box()["width"]
    pg.mouse.move(sp["x"] + 2, sp["y"] + 100)
    pg.mouse.down()
    pg.mouse.move(sp["x"] - 150, sp["y"] + 100)
    pg.mouse.up()
    assert pg.locator("#detail").bounding_box()["width"] >= w0 + 100
    pg.evaluate("document.getElementById('detail-close').click()")
    assert errors == []
