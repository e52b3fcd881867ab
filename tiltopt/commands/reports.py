"""``tiltopt explore`` (the Pareto explorer page) and ``tiltopt sheet`` (the build sheet of a design)."""
from __future__ import annotations

import functools
import http.server
import os
import re
import shlex
import threading
import webbrowser
from pathlib import Path

import click

from tiltopt.base.errors import InputError
from tiltopt.base.limits import MAX_FORCE_N, MAX_LEAN_LIMIT_DEG, MAX_STATES, MAX_TRAVEL_MM, check_count
from tiltopt.base.units import parse_number, parse_point, parse_travels

from ..cli import main
from . import output_path


class _PageHandler(http.server.BaseHTTPRequestHandler):
    """Serves the explorer page, ``plotly.min.js`` beside it and, with an explorer, the detail of any of the
    page's designs (``/detail/<row>.json``, computed on demand), and nothing else.

    No directory listings, no other file of the folder (a run folder holds its checkpoint and
    inputs), no symbolic link that leads out of the folder, and only requests whose ``Host`` is
    ``127.0.0.1:<port>`` or ``localhost:<port>``: a web page elsewhere that points a DNS name at
    127.0.0.1 (DNS rebinding) gets 421, not the data.
    """

    server_version = "tiltopt"
    sys_version = ""

    def __init__(self, *args, root: Path, page: str, explorer=None, **kw):
        self.root = Path(root)
        self.page = page
        self.explorer = explorer
        super().__init__(*args, **kw)

    def log_message(self, format, *args):  # noqa: A002 (the base class's name)
        pass

    def _send(self, code: int, body: bytes, ctype: str = "text/plain; charset=utf-8", head: bool = False,
              extra: dict | None = None):
        self.send_response(code)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Cache-Control", "no-store")
        self.send_header("Referrer-Policy", "no-referrer")
        for k, v in (extra or {}).items():
            self.send_header(k, v)
        self.end_headers()
        if not head:
            self.wfile.write(body)

    def _serve(self, head: bool):
        from urllib.parse import unquote, urlsplit

        port = self.server.server_address[1]
        host = (self.headers.get("Host") or "").strip().lower()
        if host not in (f"127.0.0.1:{port}", f"localhost:{port}"):
            return self._send(421, b"wrong Host header: open http://127.0.0.1:%d/\n" % port, head=head)
        path = unquote(urlsplit(self.path).path)
        if path == "/":
            return self._send(302, b"", head=head, extra={"Location": "/" + self.page})
        name = path[1:]
        m = re.fullmatch(r"detail/(\d{1,9})\.json", name)
        if m and self.explorer is not None:
            try:
                body = self.explorer.detail_json(int(m.group(1)))
            except IndexError:
                return self._send(404, b"no such design\n", head=head)
            return self._send(200, body, "application/json", head=head)
        ctype = {self.page: "text/html; charset=utf-8", "plotly.min.js": "text/javascript; charset=utf-8"}.get(name)
        if ctype is None:
            return self._send(404, b"not found\n", head=head)
        target = self.root / name
        real, root = os.path.realpath(target), os.path.realpath(self.root)
        if os.path.dirname(real) != root or not os.path.isfile(real):   # a symbolic link out of the folder
            return self._send(404, b"not found\n", head=head)
        try:
            with open(real, "rb") as fh:
                body = fh.read()
        except OSError:
            return self._send(404, b"not found\n", head=head)
        return self._send(200, body, ctype, head=head)

    def do_GET(self):  # noqa: N802 (the base class's name)
        self._serve(head=False)

    def do_HEAD(self):  # noqa: N802
        self._serve(head=True)


def make_server(path: Path, port: int = 0, explorer=None) -> http.server.ThreadingHTTPServer:
    """An HTTP server for the page (and plotly.min.js beside it, and with ``explorer`` the detail of its
    designs), bound to 127.0.0.1 only."""
    path = Path(path)
    handler = functools.partial(_PageHandler, root=path.parent, page=path.name, explorer=explorer)
    httpd = http.server.ThreadingHTTPServer(("127.0.0.1", port), handler)
    httpd.daemon_threads = True
    return httpd


def serve(path: Path, port: int = 0, open_browser: bool = True, explorer=None):
    """Serve the page (and plotly.min.js beside it, and the detail of any design) on 127.0.0.1 only, until Ctrl-C."""
    httpd = make_server(path, port, explorer)
    url = f"http://127.0.0.1:{httpd.server_address[1]}/{path.name}"
    click.echo(f"serving {url} (127.0.0.1 only; Ctrl-C stops)")
    if open_browser:
        threading.Timer(0.3, lambda: webbrowser.open(url)).start()
    try:
        httpd.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        httpd.server_close()


@main.command("explore")
@click.argument("run_dirs", nargs=-1, required=True, type=click.Path(file_okay=False))
@click.option("-o", "--output", type=click.Path(dir_okay=False), default=None, callback=output_path,
              help="Page to write [default: explorer.html in the first run folder].")
@click.option("--serve", "do_serve", is_flag=True,
              help="Serve the page on 127.0.0.1 and open it; the page then opens the detail of every design "
                   "(computed here when it asks).")
@click.option("--port", type=click.IntRange(0, 65535), default=0, show_default=True,
              help="Port for --serve, 0 to 65535 (0 = any free port).")
@click.option("--detail-limit", type=click.IntRange(0, 5000), default=24, show_default=True,
              help="Front designs per run whose detail (drawings, curves, clearances) the page holds, besides "
                   "its best compromise and each objective's best; with --serve every design's is computed "
                   "when the page asks.")
@click.option("--plotly-beside", is_flag=True, help="Write plotly.min.js next to the page instead of inside it.")
@click.option("--allow-changed-inputs", is_flag=True,
              help="Go on when a run's shell, loads or mechanism file changed since it ran (the page uses the "
                   "run's own copies).")
def explore_cmd(run_dirs, output, do_serve, port, detail_limit, plotly_beside, allow_changed_inputs):
    """Write the Pareto explorer of one or more runs: one offline HTML page."""
    from ..reports.runs import explore_runs

    out = Path(output) if output else Path(run_dirs[0]) / "explorer.html"
    made: list = []
    path = explore_runs(list(run_dirs), out, beside=plotly_beside, detail_limit=detail_limit,
                        allow_changed_inputs=allow_changed_inputs, notice=lambda t: click.echo(t, err=True),
                        explorer_out=made)
    click.echo(f"explorer: {path}")
    if do_serve:
        serve(path.resolve(), port, explorer=made[0])
    else:
        click.echo(f"the page holds the detail of a few designs; for every design's: tiltopt explore "
                   f"{' '.join(shlex.quote(str(d)) for d in run_dirs)} --serve")


@main.command("sheet")
@click.argument("source", type=click.Path())
@click.option("--candidate", "candidate", default=None,
              help="Candidate id (see the explorer). Needed for a run folder.")
@click.option("-o", "--output", type=click.Path(file_okay=False), default=None, callback=output_path,
              help="Folder to write [default: RUN_DIR/sheets/ID, or next to a mechanism file].")
@click.option("--jig-datum", default="0,0", show_default=True,
              help="Jig datum 'Y,Z' in mm, chassis datum frame; the pivot table also gives coordinates from it.")
@click.option("--sag-mm", type=float, default=None,
              help="Static sag (wheel travel from top-out to the design position) for the spring setup, mm, > 0 "
                   "[default: the loads' [springs] sag_mm, else the envelope's full droop].")
@click.option("--corner-load-n", type=float, default=None,
              help="Without loads: static vertical load per front wheel, N, > 0, for a suggested spring rate.")
@click.option("--loads", "loads_file", type=click.Path(dir_okay=False), default=None,
              help="Loads file (vehicle, load cases) for member sizing and tilt-lock torque [default: the run's].")
@click.option("--shell", "shell_file", type=click.Path(dir_okay=False), default=None,
              help="Body shell file for the shell section and clearances [default: the run's].")
@click.option("--lean-limit", type=float, default=30.0, show_default=True,
              help="Mechanism file only: lean limit, deg (0 < limit <= 60).")
@click.option("--travel", default="-30,0,30", show_default=True, help="Mechanism file only: travels, mm.")
@click.option("--allow-changed-inputs", is_flag=True,
              help="Run folder only: go on when the run's shell, loads or mechanism file changed since it ran "
                   "(the sheet uses the run's own copies).")
def sheet_cmd(source, candidate, output, jig_datum, sag_mm, corner_load_n, loads_file, shell_file, lean_limit, travel,
              allow_changed_inputs):
    """Write the build sheet of a design: sheet.html, pivots.csv, candidate.toml, linkage.dxf.

    SOURCE is a results folder (with --candidate ID) or a mechanism .toml file.
    """
    jig = parse_point(jig_datum, "--jig-datum")
    sag_mm = parse_number(sag_mm, "--sag-mm", "mm", lo=0.0, lo_open=True, hi=MAX_TRAVEL_MM)
    corner_load_n = parse_number(corner_load_n, "--corner-load-n", "N", lo=0.0, lo_open=True, hi=MAX_FORCE_N)
    src = Path(source)
    extra = {}
    if loads_file:
        from tiltopt.kinematics.loads import load_loads

        extra["loads"] = load_loads(loads_file)
    if shell_file:
        from tiltopt.kinematics.shell import load_shell

        extra["shell"] = load_shell(shell_file)
    if src.exists() and not src.is_dir():   # a file (a device or pipe is refused by the reader)
        from tiltopt.kinematics.mechanism import load_mechanism

        from ..reports.analysis import lean_grid
        from ..reports.sheet import SheetInputs, write_sheet

        lean_limit = parse_number(lean_limit, "--lean-limit", "deg", lo=0.0, lo_open=True, hi=MAX_LEAN_LIMIT_DEG)
        travels = parse_travels(travel)
        check_count(len(travels) * len(lean_grid(lean_limit)), MAX_STATES, "lean x travel states of the sheet",
                    "Give fewer --travel values.", key="--travel")
        mech = load_mechanism(src)
        out = Path(output) if output else src.with_name(src.stem + "_sheet")
        paths = write_sheet(out, SheetInputs(
            mech=mech, candidate_id=mech.name, lean_limit_deg=lean_limit,
            travel_mm=[float(t) for t in travels], jig_datum=jig, sag_mm=sag_mm,
            corner_load_n=corner_load_n, provenance={"config": str(src)}, **extra,
            command=f"tiltopt sheet {src} --lean-limit {lean_limit:g} --travel {travel}"))
    else:
        if not src.is_dir():
            raise InputError("not found. Give a results folder (results/RUN_ID) or a mechanism .toml file.", source)
        if not candidate:
            raise InputError("a results folder needs --candidate ID (the explorer shows each design's id and the "
                             "exact command).", source, "--candidate")
        from ..reports.runs import sheet_from_run

        paths = sheet_from_run(src, candidate, output, jig_datum=jig, sag_mm=sag_mm, corner_load_n=corner_load_n,
                               allow_changed_inputs=allow_changed_inputs,
                               notice=lambda t: click.echo(t, err=True), **extra)
    for key in ("sheet", "pivots", "candidate", "dxf"):
        click.echo(f"{key}: {paths[key]}")
