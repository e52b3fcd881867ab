"""The reference docs (docs/formats.md, docs/architecture.md) against the code they describe.

Where a fact can be checked mechanically it is checked here, both ways where that makes sense:

- every key table of docs/formats.md against what its parser accepts. The parsers name the keys
  they allow when they meet an unknown one ("Expected one of: ..."), so each table is probed with
  an unknown key placed exactly there (the error's key says the probe reached that table);
  documented required keys are deleted one at a time from a valid file and must be reported
  missing;
- the name tables against ``tiltopt.problems.registry``;
- the result-file tables against the files of a real tiny run (``tests.helpers.make_tiny_run``),
  its build sheet and the command output;
- the layering, the command list and every repository path named in the docs against the code.

A test of the checker itself (a row removed from the text must be noticed) keeps it from passing
on a docs parser that finds nothing. The reference of these checks is the code the docs describe,
so no outside source applies.
"""
from __future__ import annotations

import ast
import copy
import csv
import json
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pytest

from tiltopt.base.errors import InputError
from tiltopt.base.resources import config_path, data_path

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
FORMATS = (DOCS / "formats.md").read_text(encoding="utf-8")
ARCHITECTURE = (DOCS / "architecture.md").read_text(encoding="utf-8")
PROBE = "zz_probe"


# ------------------------------------------------------------------ reading the docs
def _cells(line: str) -> list[str]:
    """Cells of a Markdown table row (a pipe escaped as ``\\|`` stays inside its cell)."""
    parts = re.split(r"(?<!\\)\|", line.strip())
    return [p.strip().replace("\\|", "|") for p in parts[1:-1]]


def doc_tables(text: str) -> dict[tuple[str, str], list[dict]]:
    """Every Markdown table by (``##`` heading, ``###`` heading): a list of row dicts.

    A ``###`` heading is known by the text in its first backticks (``[[pins]]``), or by its
    whole text when it has none (``Top level``).
    """
    out: dict[tuple[str, str], list[dict]] = {}
    h2 = h3 = ""
    lines = text.splitlines()
    i = 0
    while i < len(lines):
        line = lines[i]
        if line.startswith("## "):
            h2, h3 = line[3:].strip(), ""
        elif line.startswith("### "):
            title = line[4:].strip()
            m = re.search(r"`([^`]+)`", title)
            h3 = m.group(1) if m else title
        elif line.startswith("|") and i + 1 < len(lines) and re.match(r"^\|\s*-{3}", lines[i + 1]):
            header = _cells(line)
            rows = []
            i += 2
            while i < len(lines) and lines[i].startswith("|"):
                rows.append(dict(zip(header, _cells(lines[i]))))
                i += 1
            out[(h2, h3)] = out.get((h2, h3), []) + rows
            continue
        i += 1
    return out


def _plain(cell: str) -> str:
    return cell.strip().strip("`")


def documented(section: str, table: str, text: str = FORMATS, column: str | None = None) -> dict[str, dict]:
    """Rows of one documented table by their first cell (backticks removed)."""
    tables = doc_tables(text)
    assert (section, table) in tables, f"docs/formats.md has no table under '## {section}' / '### {table}'"
    rows = tables[(section, table)]
    first = column or next(iter(rows[0]))
    return {_plain(r[first]): r for r in rows}


# ------------------------------------------------------------------ probing the parsers
def accepted_keys(parse: Callable[[dict], object], data: dict, where: str) -> set[str]:
    """The keys a parser accepts in the table at ``where`` (``data`` holds the probe key there)."""
    with pytest.raises(InputError) as info:
        parse(data)
    err = info.value
    key = (err.key or "").lstrip(".")   # the batch reader names a top-level key '.KEY'
    assert key == (f"{where}.{PROBE}" if where else PROBE), f"the probe did not reach {where or 'the top'}: {err}"
    m = re.search(r"Expected one of: (.*)\.$", err.detail)
    assert m, f"no list of accepted keys in: {err}"
    return {k.strip() for k in m.group(1).split(",")}


def _toml(path: Path) -> dict:
    return tomllib.loads(Path(path).read_text(encoding="utf-8"))


def _append(name: str):
    """Probe target: a new table appended to the array of tables ``name``."""
    def target(d):
        items = d.setdefault(name, [])
        items.append({})
        return items[-1], f"{name}[{len(items) - 1}]"
    return target


def _table(*path: str):
    """Probe target: the table at ``path`` (created when missing)."""
    def target(d):
        for p in path:
            d = d.setdefault(p, {})
        return d, ".".join(path)
    return target


def _top(d):
    return d, ""


@dataclass
class Probe:
    """One documented key table and how to reach it in a valid document."""

    section: str
    table: str
    base: Callable[[], dict]
    target: Callable[[dict], tuple[dict, str]]
    parse: Callable[[dict], object]
    instance: Callable[[dict], tuple[dict, str]] | None = None   # an existing table (required keys)

    @property
    def id(self) -> str:
        return f"{self.section}: {self.table}"


def _mechanism():
    return _toml(config_path("twin_beam_sprung.toml"))


def _parse_mechanism(d):
    from tiltopt.kinematics.mechanism import parse_mechanism
    return parse_mechanism(d, "probe")


def _parse_shell(d):
    from tiltopt.kinematics.shell import parse_shell
    return parse_shell(d, "probe")


def _loads():
    return _toml(config_path("loads_demo.toml"))


def _parse_loads(d):
    from tiltopt.kinematics.loads import parse_loads
    return parse_loads(d, "probe", base_dir=config_path("loads_demo.toml").parent)


def _parse_materials(d):
    from tiltopt.kinematics.loads import parse_materials
    return parse_materials(d, "probe")


def _parse_variables(d):
    from tiltopt.kinematics.mechanism import load_mechanism
    from tiltopt.problems.templates import template_from_mechanism
    mech = load_mechanism(config_path("twin_beam.toml"))
    return template_from_mechanism(mech, d["variables"], src="probe", key="variables")


def _entry(tmp_dir: Path):
    """Parse the text of a template variable file (written to ``tmp_dir``)."""
    def parse(text: str):
        from tiltopt.problems.templates import load_template_entry
        p = tmp_dir / "probe_template.toml"
        p.write_text(text, encoding="utf-8")
        return load_template_entry(p)
    return parse


def _config():
    return _toml(config_path("demo.toml"))


def _parse_config(d):
    from tiltopt.optimizer.config import parse_config
    return parse_config(d, "probe", config_path("demo.toml").parent)


def _embedded_loads():
    d = _config()
    del d["loads"]
    d.update({k: v for k, v in _loads().items() if k != "cases"})
    return d


def _benchmark():
    return {"run": _config()["run"], "benchmark": {"name": "zdt1"}}


def _batch():
    return {"batch": {"name": "probe"}, "runs": [{"config": "demo.toml"}]}


def _parse_batch(d):
    from tiltopt.optimizer.batch import parse_batch
    return parse_batch(d, "probe", config_path("demo.toml").parent)


def _first(name):
    return lambda d: (d[name][0], f"{name}[0]")


def _steering_item(name, first=False):
    """Probe target: the first table of ``[[steering.NAME]]``, or (probing) a copy appended to it."""
    def target(d):
        items = d["steering"][name]
        if not first:
            items.append(copy.deepcopy(items[0]))
        return items[-1 if not first else 0], f"steering.{name}[{len(items) - 1 if not first else 0}]"
    return target


PROBES = [
    Probe("Mechanism file", "Top level", _mechanism, _top, _parse_mechanism, _top),
    Probe("Mechanism file", "[[pins]]", _mechanism, _append("pins"), _parse_mechanism, _first("pins")),
    Probe("Mechanism file", "[[links]]", _mechanism, _append("links"), _parse_mechanism),
    Probe("Mechanism file", "[[springs]]", _mechanism, _append("springs"), _parse_mechanism, _first("springs")),
    Probe("Mechanism file", "[[sliders]]", _mechanism, _append("sliders"), _parse_mechanism, _first("sliders")),
    Probe("Mechanism file", "[[wheels]]", _mechanism, _append("wheels"), _parse_mechanism, _first("wheels")),
    Probe("Mechanism file", "[[segments]]", _mechanism, _append("segments"), _parse_mechanism),
    Probe("Mechanism file", "[steer_envelope]", _mechanism, _table("steer_envelope"), _parse_mechanism),
    Probe("Mechanism file", "[steering]", _mechanism, _table("steering"), _parse_mechanism, _table("steering")),
    Probe("Mechanism file", "[[steering.drives]]", _mechanism, _steering_item("drives"), _parse_mechanism,
          _steering_item("drives", first=True)),
    Probe("Mechanism file", "[[steering.rods]]", _mechanism, _steering_item("rods"), _parse_mechanism,
          _steering_item("rods", first=True)),
    Probe("Shell files", "Top level", lambda: _toml(config_path("shell_demo.toml")), _top, _parse_shell, _top),
    Probe("Shell files", "[[stations]]", lambda: _toml(config_path("shell_demo.toml")), _append("stations"),
          _parse_shell, _first("stations")),
    Probe("Loads file", "Top level", _loads, _top, _parse_loads, _top),
    Probe("Loads file", "[vehicle]", _loads, _table("vehicle"), _parse_loads, _table("vehicle")),
    Probe("Loads file", "[sizing]", _loads, _table("sizing"), _parse_loads, _table("sizing")),
    Probe("Loads file", "[members.NAME]", _loads, _table("members", "upper_beam"), _parse_loads),
    Probe("Loads file", "[tilt_lock]", _loads, _table("tilt_lock"), _parse_loads, _table("tilt_lock")),
    Probe("Loads file", "[springs]", _loads, _table("springs"), _parse_loads, _table("springs")),
    Probe("Loads file", "[fatigue]", _loads, _table("fatigue"), _parse_loads, _table("fatigue")),
    Probe("Loads file", "[[cases]]", _loads, _append("cases"), _parse_loads, _first("cases")),
    Probe("Materials file", "Top level", lambda: _toml(data_path("materials.toml")), _top, _parse_materials, _top),
    Probe("Materials file", "[materials.\"NAME\"]", lambda: _toml(data_path("materials.toml")),
          _table("materials", "probe_alloy"), _parse_materials, _table("materials", "4130")),
    Probe("Template variable file", "[[variables]]", lambda: {"variables": []}, _append("variables"),
          _parse_variables),
    Probe("Run config", "Top level", _config, _top, _parse_config, _top),
    Probe("Run config", "[run]", _config, _table("run"), _parse_config, _table("run")),
    Probe("Run config", "[template]", _config, _table("template"), _parse_config, _table("template")),
    Probe("Run config", "[envelope]", _config, _table("envelope"), _parse_config, _table("envelope")),
    Probe("Run config", "[envelope.steer]", _config, _table("envelope", "steer"), _parse_config),
    Probe("Run config", "[constraints]", _config, _table("constraints"), _parse_config, _table("constraints")),
    Probe("Run config", "[benchmark]", _benchmark, _table("benchmark"), _parse_config, _table("benchmark")),
    Probe("Batch file", "Top level", _batch, _top, _parse_batch, _top),
    Probe("Batch file", "[batch]", _batch, _table("batch"), _parse_batch, _table("batch")),
    Probe("Batch file", "[[runs]]", _batch, lambda d: (d["runs"][0], "runs[0]"), _parse_batch, _first("runs")),
    Probe("Batch file", "[[grid]]", _batch, _append("grid"), _parse_batch),
]


def _probe(p: Probe, text: str = FORMATS) -> tuple[set[str], set[str]]:
    """(documented keys, accepted keys) of one probe."""
    data = p.base()
    table, where = p.target(data)
    table[PROBE] = 1
    return set(documented(p.section, p.table, text)), accepted_keys(p.parse, data, where)


@pytest.mark.parametrize("probe", [p for p in PROBES if p.section != "Run config" or p.table != "Top level"],
                         ids=lambda p: p.id)
def test_documented_keys_are_the_accepted_keys(probe):
    doc, acc = _probe(probe)
    assert doc - acc == set(), f"documented in docs/formats.md but refused by the parser: {sorted(doc - acc)}"
    assert acc - doc == set(), f"accepted by the parser but missing from docs/formats.md: {sorted(acc - doc)}"


def test_run_config_top_level_keys():
    """The problem keys come from parse_problem's list; a [benchmark] config allows run and benchmark only."""
    probe = next(p for p in PROBES if p.section == "Run config" and p.table == "Top level")
    doc, acc = _probe(probe)
    assert doc == acc | {"benchmark"}
    data = _benchmark()
    _parse_config(data)   # a valid benchmark config
    data[PROBE] = 1
    with pytest.raises(InputError, match=r"only \[run\] and \[benchmark\]"):
        _parse_config(data)


def test_template_variable_file_top_level_keys(tmp_path):
    text = config_path("twin_beam_template.toml").read_text(encoding="utf-8")
    parse = _entry(tmp_path)
    rows = documented("Template variable file", "Top level")
    assert set(rows) == accepted_keys(parse, f'{PROBE} = "x"\n' + text, "")
    for key, row in rows.items():
        if not row["required"].startswith("yes"):
            continue
        if key == "variables":
            cut = text[:text.index("[[variables]]")]
        else:
            cut = "\n".join(ln for ln in text.splitlines() if not ln.startswith(f"{key} ="))
        with pytest.raises(InputError, match="required") as info:
            parse(cut)
        assert info.value.key == key


def test_embedded_loads_tables_in_a_run_config_are_the_loads_file_tables():
    """[vehicle], [tilt_lock], [springs], [fatigue] and [[load_cases]] of a run config take the loads file's
    tables' keys ([[load_cases]] those of [[cases]])."""
    for table in ("vehicle", "tilt_lock", "springs", "fatigue"):
        d = _embedded_loads()
        d.setdefault(table, {})[PROBE] = 1
        assert accepted_keys(_parse_config, d, table) == set(documented("Loads file", f"[{table}]")), table
    d = _embedded_loads()
    d["load_cases"] = [{PROBE: 1}]
    assert accepted_keys(_parse_config, d, "cases[0]") == set(documented("Loads file", "[[cases]]"))


def test_run_config_template_variables_are_the_template_file_variables():
    d = _config()
    d["template"] = {"mechanism": "wishbone_rocker.toml", "variables": [{PROBE: 1}]}
    assert accepted_keys(_parse_config, d, "template.variables[0]") == set(
        documented("Template variable file", "[[variables]]"))


@pytest.mark.parametrize("probe", [p for p in PROBES if p.instance is not None], ids=lambda p: p.id)
def test_documented_required_keys_are_required(probe):
    rows = documented(probe.section, probe.table)
    required = [k for k, r in rows.items() if r["required"].startswith("yes")]
    base = probe.base()
    present, where = probe.instance(base)
    checked = 0
    for key in required:
        if key not in present:     # e.g. a required table the base file happens not to need
            continue
        data = copy.deepcopy(base)
        table, _ = probe.instance(data)
        del table[key]
        with pytest.raises(InputError) as info:
            probe.parse(data)
        assert (info.value.key or "").lstrip(".") == (f"{where}.{key}" if where else key), str(info.value)
        checked += 1
    assert checked == len(required), "a documented required key is not in the probe's base file"
    # a key documented as optional may be left out (other checks may still object to the file)
    for key in set(rows) & set(present) - set(required):
        data = copy.deepcopy(base)
        table, _ = probe.instance(data)
        del table[key]
        try:
            probe.parse(data)
        except InputError as err:
            missing = (err.key or "").lstrip(".") == (f"{where}.{key}" if where else key) and "required" in err.detail
            assert not missing, f"{key} is documented as optional but required: {err}"


def test_checker_notices_a_missing_and_an_extra_row():
    """The comparison fails on docs that drift: a row removed, a row invented."""
    probe = next(p for p in PROBES if p.table == "[[links]]")
    start = FORMATS.index("### `[[links]]`")
    row = next(l for l in FORMATS[start:].splitlines() if l.startswith("| `tube_od_mm` |"))
    cut = FORMATS[:start] + FORMATS[start:].replace(row + "\n", "", 1)
    doc, acc = _probe(probe, cut)
    assert acc - doc == {"tube_od_mm"}
    extra = FORMATS[:start] + FORMATS[start:].replace(row, row + "\n| `colour` | string | - | | no | invented |", 1)
    doc, acc = _probe(probe, extra)
    assert doc - acc == {"colour"}


# ------------------------------------------------------------------ names
def test_objectives_table_is_the_registry():
    from tiltopt.problems.registry import OBJECTIVES

    rows = documented("Names", "Objectives")
    assert list(rows) == list(OBJECTIVES)
    for name, spec in OBJECTIVES.items():
        r = rows[name]
        assert (r["unit"], r["needs"], _plain(r["metric column"])) == (spec.unit, spec.needs, spec.metric), name
        assert float(r["sign"]) == spec.sign, name


def test_constraints_table_is_the_registry_in_column_order():
    from tiltopt.problems.registry import CLEARANCE, CONSTRAINTS

    rows = documented("Names", "Constraints")
    assert list(rows) == list(CONSTRAINTS)
    constraint_keys = set(documented("Run config", "[constraints]"))
    for name, spec in CONSTRAINTS.items():
        r = rows[name]
        assert (r["unit"], r["needs"]) == (spec.unit, spec.needs), name
        on = _plain(r["switched on by"])
        if spec.key is None:
            assert on == ("a shell" if spec.needs == CLEARANCE else "always"), name
        else:
            assert on == spec.key and spec.key in constraint_keys, name


def test_algorithm_and_template_names_are_the_registry():
    from tiltopt.problems.registry import ALGORITHMS, TEMPLATES

    assert list(documented("Names", "Algorithms")) == list(ALGORITHMS)
    rows = documented("Names", "Built-in templates")
    assert list(rows) == list(TEMPLATES)
    for name, r in rows.items():
        assert _plain(r["file"]) == f"configs/{name}_template.toml" and (ROOT / _plain(r["file"])).is_file()


# ------------------------------------------------------------------ result files
@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    from tests.helpers import make_tiny_run

    return make_tiny_run(tmp_path_factory.mktemp("docs_run"))


def _matches(column: str, names: set[str]) -> bool:
    """A column is a documented name, or fits a documented ``prefix.NAME`` row."""
    return column in names or any(n.endswith(".NAME") and column.startswith(n[:-4]) for n in names)


def test_result_columns_are_documented(tiny_run):
    from tiltopt.optimizer.results import read_parquet

    rows = documented("Run folder", "front.parquet")
    metrics = documented("Run folder", "Metric columns")
    front, _ = read_parquet(tiny_run / "front.parquet")
    evaluations, _ = read_parquet(tiny_run / "evaluations.parquet")
    assert len(front) and list(evaluations.columns) == list(front.columns)
    names = {n for n in rows if n != "metric columns"}
    for c in front.columns:
        assert _matches(c, names) or c in metrics, f"front.parquet column {c} is not in docs/formats.md"
    for n, r in rows.items():
        if n.endswith(".NAME"):
            assert any(c.startswith(n[:-4]) for c in front.columns), f"no {n} column in a real front"
        elif r["present"] == "always":
            assert n in front.columns, n
    for n, r in metrics.items():
        if r["present"] == "always":
            assert n in front.columns, n


def test_metric_table_is_the_metric_unit_table():
    from tiltopt.problems.problem import METRIC_UNITS

    rows = documented("Run folder", "Metric columns")
    assert set(rows) == set(METRIC_UNITS)
    assert {n: r["unit"] for n, r in rows.items()} == METRIC_UNITS


def test_parquet_metadata_and_generations(tiny_run):
    from tiltopt.optimizer.results import GENERATION_UNITS, read_parquet

    rows = documented("Run folder", "Parquet metadata")
    for name in ("front.parquet", "evaluations.parquet", "generations.parquet"):
        _, meta = read_parquet(tiny_run / name)
        assert set(meta) <= set(rows), name
        assert {k for k, r in rows.items() if r["present"] == "always"} <= set(meta), name
    gens, meta = read_parquet(tiny_run / "generations.parquet")
    doc = documented("Run folder", "generations.parquet")
    assert list(doc) == list(gens.columns) == list(GENERATION_UNITS)
    assert len(gens) == 3


def test_run_json_keys(tiny_run):
    rows = documented("Run folder", "run.json")
    meta = json.loads((tiny_run / "run.json").read_text(encoding="utf-8"))
    nested = {k.split(".")[0] for k in rows if "." in k}
    keys = set(meta)
    for k in nested:
        if isinstance(meta.get(k), dict):
            keys |= {f"{k}.{kk}" for kk in meta[k]}
    assert keys <= set(rows), f"run.json keys missing from docs/formats.md: {sorted(keys - set(rows))}"
    always = {k for k, r in rows.items() if r["present"] in ("always", "with a template")}
    assert always <= keys, f"documented but not written: {sorted(always - keys)}"
    assert meta["format"] == "tiltopt-run-1" and meta["status"] == "finished"


def test_run_folder_files(tiny_run):
    from tiltopt.optimizer import runfolder as RF
    from tiltopt.optimizer.results import PARTS_DIR

    rows = documented("Run folder", "", column="file")
    files = {p.name for p in tiny_run.iterdir()}
    assert files <= set(rows)
    # every file tiltopt writes (and so may delete) at the top of a run folder is documented
    names = {r.split("/")[0] for r in rows}
    assert set(RF.RUN_FILES) | {RF.RUN_LOCK, RF.INPUTS_DIR, PARTS_DIR} | set(RF.REPORT_FILES) - {"plotly.min.js"} \
        <= names, sorted(set(RF.RUN_FILES) - names)


def _nested_keys(doc: dict, tables) -> set[str]:
    keys = set(doc)
    for k in tables:
        if isinstance(doc.get(k), dict):
            keys |= {f"{k}.{kk}" for kk in doc[k]}
    return keys


def test_checkpoint_json_keys(tiny_run):
    """The key table of checkpoint.npz against the JSON member of a real checkpoint, both ways."""
    import numpy as np

    from tiltopt.optimizer.checkpoint import FORMAT, JSON_KEY

    rows = documented("Run folder", "checkpoint.npz")
    with np.load(tiny_run / "checkpoint.npz", allow_pickle=False) as z:
        doc = json.loads(z[JSON_KEY].tobytes())
        members = set(z.files)
    assert _nested_keys(doc, ("algorithm", "state")) == set(rows)
    assert doc["format"] == FORMAT and f'`"{FORMAT}"`' in rows["format"]["meaning"]
    assert JSON_KEY in FORMATS and all(m == JSON_KEY or re.fullmatch(r"a\d+", m) for m in members)


def test_lock_file_keys(tiny_run):
    from tiltopt.optimizer.runfolder import BATCH_LOCK, RUN_LOCK

    lock = json.loads((tiny_run / RUN_LOCK).read_text(encoding="utf-8"))
    assert set(lock) == set(documented("Run folder", "run.lock"))
    assert BATCH_LOCK in documented("Batch file", "Batch folder", column="file")


def test_input_roles_and_records(tiny_run):
    from tiltopt.optimizer.runfolder import INPUT_ROLES

    assert list(documented("Run folder", "inputs/")) == list(INPUT_ROLES)
    meta = json.loads((tiny_run / "run.json").read_text(encoding="utf-8"))
    described = set(re.findall(r"`([a-z0-9_]+)`", documented("Run folder", "run.json")["inputs"]["meaning"]))
    for rec in meta["inputs"]:
        assert set(rec) <= described, sorted(set(rec) - described)
        assert rec["copy"] is None or rec["copy"].startswith("inputs/" + rec["role"])


def test_merged_front_run_json_keys(tiny_run, tmp_path):
    from tiltopt.optimizer.merge import MERGE_FORMAT, merge_fronts

    out, _ = merge_fronts([tiny_run], tmp_path / "merged")
    meta = json.loads((out / "run.json").read_text(encoding="utf-8"))
    rows = documented("Run folder", "Merged front folder")
    assert set(meta) == set(rows)
    assert meta["format"] == MERGE_FORMAT and f'`"{MERGE_FORMAT}"`' in rows["format"]["meaning"]
    assert {p.name for p in out.iterdir()} == {"front.parquet", "run.json", "run.lock"}


def test_batch_folder_files():
    from tiltopt.optimizer.batch import SUMMARY

    assert SUMMARY in documented("Batch file", "Batch folder", column="file")


def test_batch_summary_columns():
    from tiltopt.optimizer.batch import SUMMARY_UNITS

    assert list(documented("Batch file", "summary.parquet")) == list(SUMMARY_UNITS)


def test_build_sheet_files(tiny_run, tmp_path):
    import ezdxf

    from tiltopt.optimizer.results import load_run
    from tiltopt.reports.runs import best_compromise, sheet_from_run

    run = load_run(tiny_run)
    paths = sheet_from_run(tiny_run, best_compromise(run.front), tmp_path / "sheet", run=run)
    files = documented("Build-sheet folder", "", column="file")
    assert {p.name for p in (tmp_path / "sheet").iterdir()} == set(files)
    lines = [ln for ln in paths["pivots"].read_text(encoding="utf-8").splitlines() if not ln.startswith("#")]
    assert next(csv.reader(lines)) == list(documented("Build-sheet folder", "pivots.csv"))
    doc = ezdxf.readfile(str(paths["dxf"]))
    layers = {layer.dxf.name for layer in doc.layers} - {"0", "Defpoints"}
    names = set(documented("Build-sheet folder", "linkage.dxf"))
    assert all(n in names or (n.startswith("BODY_") and "BODY_NAME" in names) for n in layers), layers
    assert names - {"BODY_NAME"} <= layers and any(n.startswith("BODY_") for n in layers)


# ------------------------------------------------------------------ command output
def _cli_json(*args):
    from click.testing import CliRunner

    from tiltopt.cli import main

    res = CliRunner().invoke(main, list(args))
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def test_sweep_json_record_keys():
    rows = _cli_json("sweep", str(config_path("twin_beam_sprung.toml")), "--lean", "0,10", "--format", "json")
    assert list(documented("Command output", "tiltopt sweep --format json")) == list(rows[0])


def test_clearance_and_loads_json_keys():
    mech = str(config_path("wishbone_rocker.toml"))
    out = _cli_json("clearance", mech, "--shell", str(config_path("shell_demo.toml")), "--lean", "0,10",
                    "--format", "json")
    assert list(documented("Command output", "tiltopt clearance --format json")) == list(out)
    out = _cli_json("loads", mech, "--loads", str(config_path("loads_demo.toml")), "--format", "json")
    assert list(documented("Command output", "tiltopt loads --format json")) == list(out)


# ------------------------------------------------------------------ architecture
LAYERS = {"tiltopt.base": 0, "tiltopt.configs": 0, "tiltopt.kinematics": 1, "tiltopt.problems": 2,
          "tiltopt.optimizer": 3}
FOLDERS = {"tiltopt/base": "tiltopt.base", "kinematics": "tiltopt.kinematics", "problems": "tiltopt.problems",
           "optimizer": "tiltopt.optimizer"}


def _layer(module: str) -> int:
    for pkg, n in LAYERS.items():
        if module == pkg or module.startswith(pkg + "."):
            return n
    return 4   # the CLI, the commands, the reports


def test_layers_only_look_down():
    """docs/architecture.md, "Packages and layers": every import of a layer is of its own or a lower one."""
    checked = 0
    for folder, pkg in FOLDERS.items():
        for path in sorted((ROOT / folder).glob("*.py")):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            for node in ast.walk(tree):
                if isinstance(node, ast.ImportFrom):
                    mods = [pkg] if node.level else [node.module or ""]
                elif isinstance(node, ast.Import):
                    mods = [a.name for a in node.names]
                else:
                    continue
                for m in mods:
                    if m == "tiltopt" or m.startswith("tiltopt."):
                        assert _layer(m) <= LAYERS[pkg], f"{path.relative_to(ROOT)} imports {m}"
                        checked += 1
    assert checked > 50


def test_every_command_is_in_the_architecture_table():
    from tiltopt.cli import main

    rows = documented("Commands", "", text=ARCHITECTURE, column="command")
    assert set(rows) == {f"tiltopt {name}" for name in main.commands}
    for r in rows.values():
        assert (ROOT / _plain(r["module"])).is_file()


REPO_DIRS = ("kinematics", "problems", "optimizer", "tiltopt", "configs", "tests", "benchmarks", "docs")


@pytest.mark.parametrize("doc", ["formats.md", "architecture.md", "domain.md"])
def test_paths_named_in_the_docs_exist(doc):
    text = (DOCS / doc).read_text(encoding="utf-8")
    paths = {p for p in re.findall(r"`([A-Za-z_][\w./-]*)`", text)
             if p.split("/")[0] in REPO_DIRS and "/" in p and "<" not in p}
    missing = sorted(p for p in paths if not (ROOT / p.rstrip("/")).exists())
    assert not missing, f"docs/{doc} names paths that do not exist: {missing}"


def test_readme_and_developers_point_at_the_docs():
    for name in ("README.md", "DEVELOPERS.md"):
        text = (ROOT / name).read_text(encoding="utf-8")
        for doc in ("docs/domain.md", "docs/formats.md", "docs/architecture.md"):
            assert doc in text, f"{name} does not point at {doc}"
