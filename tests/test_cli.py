"""The command line: start-up cost, module entry point, demo and analyze."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

from click.testing import CliRunner

from reporting.cli import main


def test_help_does_not_import_heavy_modules() -> None:
    # Lazy imports keep `segreport --help` quick (design brief).
    code = (
        "import sys\n"
        "from reporting.cli import main\n"
        "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
        "heavy = [m for m in ('pandas', 'scipy', 'numpy', 'reportlab', 'jinja2', 'pydantic') if m in sys.modules]\n"
        "print('HEAVY:' + ','.join(heavy))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "HEAVY:"


def test_a_command_loads_only_its_own_module(tmp_path: Path) -> None:
    # Start-up cost of one `segreport analyze` (issue 11, item 8): the batch, server, quality and
    # interface commands are not imported to run it, nor is logging (common practice)
    CliRunner().invoke(main, ["demo", "-o", str(tmp_path)])
    study = tmp_path / "DEMO-0002.yaml"
    code = (
        "import sys\n"
        "from reporting.cli import main\n"
        f"try:\n    main(['analyze', {str(study)!r}])\nexcept SystemExit:\n    pass\n"
        "loaded = sorted(m for m in sys.modules if m.startswith('reporting.cli.') or m == 'logging')\n"
        "print('LOADED:' + ','.join(loaded))\n"
        "print('NARRATIVE:' + ','.join(sorted(m for m in sys.modules if '.narrative' in m)))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    loaded, narrative = out.stdout.strip().splitlines()[-2:]
    assert loaded == "LOADED:reporting.cli.common,reporting.cli.study"
    # the record's computed impression needs the impression wording, not the whole narrative
    assert narrative == (
        "NARRATIVE:reporting.render.narrative,reporting.render.narrative.impression,"
        "reporting.render.narrative.words"
    )


def test_lazy_package_names_are_exported_and_resolve() -> None:
    import importlib

    for name in (
        "reporting",
        "reporting.kinetics",
        "reporting.qa",
        "reporting.render",
        "reporting.render.narrative",
    ):
        package = importlib.import_module(name)
        lazy = package._LAZY
        assert set(lazy) <= set(package.__all__), name
        for attribute, module in lazy.items():
            value = getattr(package, attribute)
            assert value is getattr(importlib.import_module(module), attribute), (name, attribute)


def test_every_command_is_listed_and_a_near_miss_is_suggested() -> None:
    listed = CliRunner().invoke(main, ["--help"]).output
    for name in [
        "agreement",
        "analyze",
        "batch",
        "curves",
        "demo",
        "dicom",
        "fhir",
        "hl7",
        "qa",
        "report",
        "schema",
        "serve",
        "store",
        "validate",
    ]:
        assert f"\n  {name} " in listed
    wrong = CliRunner().invoke(main, ["analyse"])
    assert wrong.exit_code == 2
    assert "Did you mean 'analyze'?" in wrong.output


def test_python_dash_m_runs_the_cli() -> None:
    out = subprocess.run(
        [sys.executable, "-m", "reporting", "--help"], capture_output=True, text=True, check=True
    )
    assert "Usage: segreport" in out.stdout
    for command in ("analyze", "validate", "demo"):
        assert command in out.stdout


def test_demo_writes_studies_and_records(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["demo", "-o", str(tmp_path)])
    assert result.exit_code == 0, result.output
    records = sorted(tmp_path.glob("*.record.json"))
    studies = sorted(tmp_path.glob("DEMO-*.yaml"))
    expected = [f"DEMO-000{n}" for n in range(1, 7)]  # the six invented demo studies
    assert [p.name.removesuffix(".yaml") for p in studies] == expected
    assert [p.name.removesuffix(".record.json") for p in records] == expected
    for path in records:
        record = json.loads(path.read_text())
        assert record["study"]["id"] == path.name.removesuffix(".record.json")


def test_analyze_prints_record_or_writes_file(tmp_path: Path) -> None:
    CliRunner().invoke(main, ["demo", "-o", str(tmp_path)])
    study = tmp_path / "DEMO-0002.yaml"
    shown = CliRunner().invoke(main, ["analyze", str(study)])
    assert shown.exit_code == 0
    record = json.loads(shown.stdout)
    assert record["conclusion"]["ischemic_territories"] == ["LAD"]
    out = tmp_path / "sub" / "r.json"
    written = CliRunner().invoke(main, ["analyze", str(study), "-o", str(out)])
    assert written.exit_code == 0 and json.loads(out.read_text()) == record


def test_territory_map_option_overrides_study(tmp_path: Path) -> None:
    CliRunner().invoke(main, ["demo", "-o", str(tmp_path)])
    result = CliRunner().invoke(
        main, ["analyze", str(tmp_path / "DEMO-0004.yaml"), "--territory-map", "left_dominant"]
    )
    assert json.loads(result.stdout)["conclusion"]["ischemic_territories"] == ["LCx"]


def test_settings_file_overrides_and_is_checked(tmp_path: Path) -> None:
    CliRunner().invoke(main, ["demo", "-o", str(tmp_path)])
    lab = tmp_path / "lab.yaml"
    lab.write_text("heart_rate_formula: tanaka\n")
    result = CliRunner().invoke(
        main, ["analyze", str(tmp_path / "DEMO-0001.yaml"), "--settings", str(lab)]
    )
    stress = json.loads(result.stdout)["stress"]
    assert stress["age_predicted_max_hr_bpm"] == 208 - 0.7 * 58  # Tanaka H et al., JACC 2001
    lab.write_text("target_heart_rate_fraction: lots\nno_such_setting: 1\n")
    bad = CliRunner().invoke(
        main, ["analyze", str(tmp_path / "DEMO-0001.yaml"), "--settings", str(lab)]
    )
    assert bad.exit_code == 1
    assert "target_heart_rate_fraction" in bad.stderr and "no_such_setting" in bad.stderr


def test_usage_error_exits_2() -> None:
    result = CliRunner().invoke(main, ["analyze"])
    assert result.exit_code == 2


def test_unwritable_output_is_one_error_line(tmp_path: Path) -> None:
    CliRunner().invoke(main, ["demo", "-o", str(tmp_path)])
    (tmp_path / "blocker").write_text("x")
    result = CliRunner().invoke(
        main,
        ["analyze", str(tmp_path / "DEMO-0001.yaml"), "-o", str(tmp_path / "blocker" / "r.json")],
    )
    assert result.exit_code == 1
    assert result.stderr.startswith("Error: ") and "cannot write" in result.stderr
    schema = CliRunner().invoke(main, ["schema", "-o", str(tmp_path / "blocker" / "s")])
    assert schema.exit_code == 1 and "cannot write" in schema.stderr


def test_model_modules_keep_their_annotations_evaluated() -> None:
    # pydantic evaluates string annotations (PEP 563) field by field at import, a few per cent of
    # one `segreport analyze` (issue 11, item 8; common practice); see DEVELOPERS.md, "House rules"
    import reporting

    package = Path(reporting.__file__).parent
    for name in ("model", "results", "settings", "procedure", "kinetics/models"):
        text = (package / f"{name}.py").read_text(encoding="utf-8")
        assert "from __future__ import annotations" not in text, name
