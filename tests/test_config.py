"""Run configs: strict [run] table, problem part delegated to tiltopt.problems.spec, `tiltopt check` and the
CLI commands. Expected sizes are derived in the test from the config's own numbers (closed form)."""
from __future__ import annotations

import math
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.optimizer.config import check_config_lines, load_config, parse_config
from tiltopt.problems.templates import get_template

ROOT = Path(__file__).resolve().parents[1]
BENCH = {"run": {"name": "b", "seed": 1, "population": 8, "generations": 2}, "benchmark": {"name": "zdt1", "n_var": 4}}


def _with(section, **kw):
    d = {k: dict(v) for k, v in BENCH.items()}
    d[section].update(kw)
    return d


@pytest.mark.parametrize("data,key", [
    (_with("run", colour="red"), "run.colour"),
    (_with("run", algorithm="nsga9"), "run.algorithm"),
    (_with("run", population=2), "run.population"),
    (_with("run", seed=-1), "run.seed"),
    (_with("run", generations=1.5), "run.generations"),
    (_with("run", name="a/b"), "run.name"),
    (_with("benchmark", name="zdt7"), "benchmark.name"),
    (_with("benchmark", nvar=3), "benchmark.nvar"),
    ({**BENCH, "template": {"name": "twin_beam"}}, "template"),
    ({"benchmark": {"name": "zdt1"}}, "run"),
])
def test_errors_name_the_key(data, key):
    with pytest.raises(InputError) as e:
        parse_config(data, "c.toml")
    assert e.value.key == key and e.value.source == "c.toml"


def test_missing_required_run_key():
    d = _with("run")
    del d["run"]["seed"]
    with pytest.raises(InputError) as e:
        parse_config(d, "c.toml")
    assert e.value.key == "run.seed" and "missing" in str(e.value)


def test_problem_tables_go_to_problems_spec(tmp_path):
    data = tomllib.loads((ROOT / "configs" / "demo.toml").read_text())
    cfg = parse_config(data, "demo.toml", ROOT / "configs")
    assert cfg.run.output == (ROOT / "results").resolve() and cfg.run.algorithm == data["run"]["algorithm"]
    assert cfg.spec.objectives == tuple(data["objectives"])
    assert cfg.spec.shell_path == (ROOT / "configs" / data["shell"]).resolve()
    data["envelope"]["lean_stepp_deg"] = 5.0       # a typo in a problem table: tiltopt.problems.spec names it
    with pytest.raises(InputError) as e:
        parse_config(data, "demo.toml", ROOT / "configs")
    assert e.value.key == "envelope.lean_stepp_deg"


def test_check_demo_config_size_and_estimate():
    path = ROOT / "configs" / "demo.toml"
    data = tomllib.loads(path.read_text())
    lines = check_config_lines(path)
    text = "\n".join(lines)
    fixed = data["template"].get("fixed", {})
    n_var = get_template(data["template"]["name"], fixed=fixed).n_var          # held variables leave the search
    env = data["envelope"]
    n_lean = math.floor(env["lean_limit_deg"] / env["lean_step_deg"]) + 1      # 0, step, ..., limit
    n_states = n_lean * len(env["travel_mm"])
    assert f"{n_var} variables" in text and f"{len(data['objectives'])} objectives" in text
    assert f"states per candidate: {n_states}" in text
    assert "estimated run time:" in text and "valid" in lines[0]
    # every requirement in force is listed with its limit and where it comes from
    assert "max_camber_error: max_camber_error_deg = 1 deg (our choice" in text
    assert "max_width: max_width_mm = 900 mm (set in the config)" in text
    assert "carrier_clearance: carrier_margin_mm = 3 mm" in text and "common practice, no source" in text


def test_cli_check_run_and_errors(tmp_path):
    cfg = tmp_path / "b.toml"
    cfg.write_text('[run]\nname = "b"\nseed = 1\npopulation = 8\ngenerations = 3\noutput = "out"\n'
                   '[benchmark]\nname = "zdt1"\nn_var = 4\n')
    r = CliRunner().invoke(main, ["check", str(cfg)])
    assert r.exit_code == 0 and "benchmark 'zdt1', 4 variables" in r.output
    r = CliRunner().invoke(main, ["run", str(cfg), "--quiet"])
    assert r.exit_code == 0, r.output
    assert "finished after 3 generations" in r.output and "Caution" in r.output
    assert (tmp_path / "out" / "b-s1" / "front.parquet").is_file()
    r = CliRunner().invoke(main, ["run", str(cfg), "--quiet"])
    assert r.exit_code == 2 and "already exists" in r.output
    r = CliRunner().invoke(main, ["run", "--resume", str(tmp_path / "out" / "b-s1")])
    assert r.exit_code == 0 and "finished" in r.output
    cfg.write_text(cfg.read_text().replace("seed = 1", "seed = 1\nsead = 2"))
    r = CliRunner().invoke(main, ["run", str(cfg)])
    assert r.exit_code == 2 and "run.sead" in r.output


def test_demo_command_with_small_config(tmp_path):
    data = (ROOT / "configs" / "demo.toml").read_text()
    data = data.replace("population = 100", "population = 8").replace("generations = 250", "generations = 2")
    for name in ("shell_demo.toml", "loads_demo.toml"):        # the copy lives elsewhere: absolute paths
        data = data.replace(f'"{name}"', f'"{ROOT / "configs" / name}"')
    (tmp_path / "d.toml").write_text(data)
    r = CliRunner().invoke(main, ["demo", "--config", str(tmp_path / "d.toml"), "--output", str(tmp_path / "res"),
                                  "--quiet"])
    assert r.exit_code == 0, r.output
    assert str(tmp_path / "res" / "harbourline-demo-s1") in r.output
    assert load_config(tmp_path / "d.toml").run.population == 8
