"""The command line (typer's CliRunner): exit codes, JSON against the committed
schema, schema freshness, and what `import biastree` pulls in."""

from __future__ import annotations

import json
import subprocess
import sys

import jsonschema
import pytest
from conftest import ROOT, SAMPLES
from typer.testing import CliRunner

from biastree.cli import app
from biastree.output.results import schema_text

runner = CliRunner()


def test_samples_exist() -> None:
    names = {p.stem for p in SAMPLES}
    assert {"bipolar_small", "cmos_soc", "failing_budgets"} <= names
    for path in SAMPLES:
        assert "invented" in path.read_text().lower()  # demo data says so


@pytest.mark.parametrize(("sample", "code"), [("bipolar_small", 0), ("cmos_soc", 0), ("failing_budgets", 1)])
def test_check_exit_codes(sample: str, code: int) -> None:
    result = runner.invoke(app, ["check", str(ROOT / "samples" / f"{sample}.yaml")])
    assert result.exit_code == code, result.output
    assert "Design estimates" in result.output


def test_failing_sample_explains_itself() -> None:
    out = runner.invoke(app, ["check", str(ROOT / "samples" / "failing_budgets.yaml")]).output
    assert "amp_bias: budget:" in out and "β loading at p_fan" in out
    assert "hot_node: compliance: output of p_fan needs" in out


@pytest.mark.parametrize("which", ["plan", "results"])
def test_committed_schemas_are_fresh(which: str) -> None:
    committed = (ROOT / "schemas" / f"{which}.schema.json").read_text(encoding="utf-8")
    assert committed == schema_text(which), f"schemas/{which}.schema.json is stale: run `biastree schema {which} -o ...`"


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_json_matches_results_schema(sample) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(app, ["check", str(sample), "--json"])
    assert result.exit_code in (0, 1)
    data = json.loads(result.stdout)
    schema = json.loads((ROOT / "schemas" / "results.schema.json").read_text())
    jsonschema.validate(data, schema)
    assert data["summary"]["failed"] == sum(l["verdict"] == "fail" for l in data["loads"])


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_samples_match_plan_schema(sample) -> None:  # type: ignore[no-untyped-def]
    import yaml

    schema = json.loads((ROOT / "schemas" / "plan.schema.json").read_text())
    jsonschema.validate(yaml.safe_load(sample.read_text()), schema)


def test_plan_schema_rejects_unknown_key() -> None:
    schema = json.loads((ROOT / "schemas" / "plan.schema.json").read_text())
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate({"supply": 1, "devices": {}, "reference": {}, "mirrors": {}, "loads": {}, "supplly": 2}, schema)


def test_output_file_written_whole(tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "r.json"
    result = runner.invoke(app, ["check", str(SAMPLES[0]), "--json", "-o", str(out)])
    assert result.exit_code in (0, 1)
    assert json.loads(out.read_text())["loads"]
    assert [p.name for p in tmp_path.iterdir()] == ["r.json"]  # no temporary left behind


def test_output_to_missing_folder_is_clean_error(tmp_path) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(app, ["check", str(SAMPLES[0]), "-o", str(tmp_path / "no" / "r.txt")])
    assert result.exit_code == 2 and "does not exist" in result.output


def test_forward_bias_option_moves_compliance() -> None:
    path = str(ROOT / "samples" / "failing_budgets.yaml")
    a = json.loads(runner.invoke(app, ["check", path, "--json"]).stdout)
    b = json.loads(runner.invoke(app, ["check", path, "--json", "--forward-bias", "0.3V"]).stdout)
    hot_a = next(l for l in a["loads"] if l["name"] == "hot_node")
    hot_b = next(l for l in b["loads"] if l["name"] == "hot_node")
    assert hot_b["compliance_margin"] == pytest.approx(hot_a["compliance_margin"] + 0.3, abs=1e-12)
    assert runner.invoke(app, ["check", path, "--forward-bias", "3A"]).exit_code == 2


def test_usage_error_is_exit_2() -> None:
    assert runner.invoke(app, ["check"]).exit_code == 2
    assert runner.invoke(app, ["check", "x.yaml", "--bogus"]).exit_code == 2


def test_generate_writes_valid_plan(tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "g.yaml"
    assert runner.invoke(app, ["generate", "300", "-o", str(out), "--seed", "4"]).exit_code == 0
    result = runner.invoke(app, ["check", str(out), "--json"])
    assert len(json.loads(result.stdout)["loads"]) == 300


def test_import_pulls_in_no_cli_or_drawing_library() -> None:
    code = "import sys, biastree; biastree.check('samples/bipolar_small.yaml'); " \
           "print(sorted(m for m in ('typer', 'click', 'graphviz', 'matplotlib') if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


_HEAVY = ("numpy", "pydantic", "yaml", "orjson", "rich", "networkx", "scipy", "matplotlib", "graphviz", "selenium")


def test_import_and_help_stay_light() -> None:
    # `import biastree` and `biastree --help` import what they need when they need it
    # (issue 13: both under 0.4 s; the time is shown by benchmarks/bench_check.py, the
    # modules are checked here): no numerical, parsing, graph or rich-text library.
    show = f"print(sorted(m for m in {_HEAVY!r} if m in sys.modules))"
    bare = subprocess.run([sys.executable, "-c", f"import sys, biastree; {show}"], cwd=ROOT,
                          capture_output=True, text=True, check=True).stdout
    assert bare.strip() == "[]"
    code = ("import sys\nsys.argv = ['biastree', '--help']\nimport biastree.cli\ntry:\n    biastree.cli.main()\n"
            f"except SystemExit:\n    pass\nsys.stdout = sys.__stderr__\n{show}")
    proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True)
    assert "Commands:" in proc.stdout and "check" in proc.stdout
    assert proc.stderr.strip().splitlines()[-1] == "[]"
    # the lazy names still resolve to the real objects
    names = "Audit OperatingPoint Plan Tree audit build solve".split()
    out = subprocess.run([sys.executable, "-c", f"import biastree; print(all(getattr(biastree, n) for n in {names!r}))"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert out.strip() == "True"
