"""The explorer page in a real browser: headless Chromium (system package) driven by Playwright.

Skips, saying why, only where no browser can be had (no Chromium binary, or one that does not start); the
playwright package is a test dependency.
"""
from __future__ import annotations

import os
import shutil

import pytest

from tests.helpers import fixture_run

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]


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


def _open(browser, path):
    """A new page on ``path`` with its console errors and requests collected, the plot drawn."""
    pg = browser.new_page(viewport={"width": 1400, "height": 900})
    errors, requests = [], []
    pg.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    pg.on("pageerror", lambda e: errors.append(str(e)))
    pg.on("request", lambda r: requests.append(r.url))
    pg.goto(path.as_uri())
    pg.wait_for_function("window.tiltoptExplorer !== undefined")
    pg.wait_for_selector("#matrix .main-svg")
    return pg, errors, requests


@pytest.fixture(scope="module")
def page(browser, tmp_path_factory):
    from tests.helpers import make_tiny_run
    from tiltopt.optimizer.results import load_run
    from tiltopt.reports.runs import explore_runs

    folder = tmp_path_factory.mktemp("page")
    run_dir = make_tiny_run(folder)               # a real tiny run of the optimiser
    front = load_run(run_dir).front
    path = explore_runs([run_dir], folder / "explorer.html")
    sheet_dir = str(run_dir)
    front = front.reset_index(drop=True)
    front.attrs["sheet_dir"] = sheet_dir
    pg, errors, requests = _open(browser, path)
    yield pg, errors, requests, front
    pg.close()


def test_loads_without_errors_or_network(page):
    pg, errors, requests, front = page
    assert errors == []
    # offline: the page asks for nothing but itself (file: and data: URLs)
    assert all(u.startswith(("file:", "data:", "blob:")) for u in requests), requests
    assert pg.locator("#safety").inner_text().startswith("Caution")


def _point_xy(pg, row):
    """Page pixel of candidate ``row`` in the first panel (x = objective 0, y = objective 1)."""
    return pg.evaluate("""(row) => {
        const gd = document.getElementById('matrix');
        const E = window.tiltoptExplorer, D = E.data;
        const t = gd._fullData[0];
        const k = E.traceRows[0].indexOf(row);
        const xa = gd._fullLayout[t.xaxes[0].replace('x', 'xaxis')];
        const ya = gd._fullLayout[t.yaxes[1].replace('y', 'yaxis')];
        const r = gd.getBoundingClientRect();
        const vx = t.dimensions[0].values[k], vy = t.dimensions[1].values[k];
        return [r.left + xa._offset + xa.l2p(vx), r.top + ya._offset + ya.l2p(vy)];
    }""", row)


def test_click_opens_the_candidate_detail(page):
    pg, errors, requests, front = page
    # pick a feasible front design that no other design hides in the first panel
    objs = [c for c in front.columns if c.startswith("obj.")][:2]
    F = front[objs].to_numpy()
    import numpy as np

    d = np.hypot(*(F[:, None, :] - F[None, :, :]).transpose(2, 0, 1) / np.ptp(F, axis=0)[:, None, None])
    np.fill_diagonal(d, np.inf)
    iso = np.where(front["feasible"].astype(bool).to_numpy(), d.min(axis=1), -1.0)
    row = int(np.argmax(iso))
    x, y = _point_xy(pg, row)
    pg.mouse.move(x, y)
    pg.wait_for_timeout(200)
    pg.mouse.click(x, y)
    pg.wait_for_selector("#detail:not([hidden])", timeout=5000)
    assert pg.locator("#detail-id").inner_text() == front["candidate_id"].iloc[row]
    assert pg.locator("#sheet-cmd").inner_text() == \
        f"tiltopt sheet {front.attrs['sheet_dir']} --candidate {front['candidate_id'].iloc[row]}"
    assert pg.locator("#drawing svg .tyre").count() == 2
    assert errors == []


def test_slider_changes_the_drawing(page):
    pg, errors, requests, front = page
    if pg.locator("#detail").get_attribute("hidden") is not None:
        pg.evaluate("window.tiltoptExplorer.openDetail(0)")
    pg.wait_for_selector("#drawing svg .tyre")
    before = pg.locator("#drawing svg .tyre").first.get_attribute("points")
    lean0 = pg.locator("#drawing svg").get_attribute("data-lean")
    leans = pg.evaluate("window.tiltoptExplorer.data.runs[0].lean_deg")
    k = len(leans) - 2
    pg.locator("#lean-slider").fill(str(k))
    after = pg.locator("#drawing svg .tyre").first.get_attribute("points")
    assert pg.locator("#drawing svg").get_attribute("data-lean") != lean0
    assert float(pg.locator("#drawing svg").get_attribute("data-lean")) == pytest.approx(leans[k])
    assert after != before
    assert f"{leans[k]:.1f} deg" in pg.locator("#lean-value").inner_text()
    # the travel selector draws another state
    pg.locator("#travel-select").select_option("2")
    assert float(pg.locator("#drawing svg").get_attribute("data-travel")) == pytest.approx(30.0)
    assert errors == []


def test_colour_by_selector(page):
    pg, errors, requests, front = page
    var = [c for c in front.columns if c.startswith("var.")][-1]
    pg.locator("#colour-by").select_option(var)
    colours = pg.evaluate("document.getElementById('matrix')._fullData[0].marker.color")
    feas = front[front["feasible"].astype(bool)]
    assert colours == pytest.approx(feas[var].tolist())
    title = pg.evaluate("document.getElementById('matrix')._fullData[0].marker.colorbar.title.text")
    assert title == var[4:].replace("_", " ") + " [mm]"
    pg.locator("#colour-by").select_option("__run")
    assert pg.evaluate("document.getElementById('matrix')._fullData[0].marker.color") == [0] * len(feas)
    # infeasible designs on demand, grey
    pg.locator("#show-infeasible").check()
    assert pg.evaluate("document.getElementById('matrix')._fullData[1].visible") is True
    assert pg.evaluate("document.getElementById('matrix')._fullData[1].marker.color") == "#b4b9be"
    # the parallel-coordinates view draws with the same colouring
    pg.locator("#view-parallel").click()
    pg.wait_for_selector("#parallel .main-svg")
    n_dims = pg.evaluate("document.getElementById('parallel')._fullData[0].dimensions.length")
    assert n_dims == len([c for c in front.columns if c.startswith("obj.")])
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
        import re

        box = re.search(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)", pdf)
        w_pt = float(box.group(1))
        assert w_pt == pytest.approx(width_mm / 25.4 * 72.0, abs=1.0)   # 72 pt per inch (PDF 1.7, 8.3.2.3)
    finally:
        sheet.close()


# the page pixel of the most isolated feasible design of the plot, and its row: (x, y, row)
_ISOLATED_POINT = """() => {
    const gd = document.getElementById('matrix');
    const E = window.tiltoptExplorer;
    const k0 = gd._fullData.findIndex((t) => E.traceRows[t.index] && t.name === 'designs');
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
        drawn = pg.evaluate("document.getElementById('matrix')._fullData.find((t) => t.name === 'designs')")
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
        assert pg.evaluate("document.getElementById('parallel')._fullData[0].dimensions.length") == n_obj
        assert errors == []
    finally:
        pg.close()
