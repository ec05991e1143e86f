"""The analysis record: committed schemas match the models; every record validates."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest

from reporting.analysis import analyze_file
from reporting.demo import demo_study_names, write_demo
from reporting.export.record import SCHEMAS, record_dict, schema_text

ROOT = Path(__file__).resolve().parent.parent
SCHEMA_DIR = ROOT / "schemas"


@pytest.mark.parametrize("name", sorted(SCHEMAS))
def test_committed_schema_matches_models(name: str) -> None:
    committed = (SCHEMA_DIR / name).read_text(encoding="utf-8")
    assert committed == schema_text(SCHEMAS[name]()), (
        f"schemas/{name} is stale: run `segreport schema -o schemas`"
    )


def test_schemas_are_versioned_and_valid() -> None:
    for name in SCHEMAS:
        schema = json.loads((SCHEMA_DIR / name).read_text())
        jsonschema.Draft202012Validator.check_schema(schema)
        assert schema["$id"].endswith(name)


def test_demo_records_validate_against_schema(tmp_path: Path) -> None:
    record_schema = json.loads((SCHEMA_DIR / "record-1.schema.json").read_text())
    study_schema = json.loads((SCHEMA_DIR / "study-1.schema.json").read_text())
    write_demo(tmp_path)
    for name in demo_study_names():
        import yaml

        study = yaml.safe_load((tmp_path / name).read_text())
        jsonschema.validate(json.loads(json.dumps(study, default=str)), study_schema)
        record = record_dict(analyze_file(tmp_path / name))
        jsonschema.validate(record, record_schema)


def test_record_is_stable(tmp_path: Path) -> None:
    write_demo(tmp_path)
    first = analyze_file(tmp_path / "DEMO-0002.yaml")
    second = analyze_file(tmp_path / "DEMO-0002.yaml")
    assert record_dict(first) == record_dict(second)


def test_record_text_is_plain_json_of_the_record(tmp_path: Path) -> None:
    from reporting.export.record import record_json

    write_demo(tmp_path, reports=False)
    for name in demo_study_names():
        analysis = analyze_file(tmp_path / name)
        expected = json.dumps(record_dict(analysis), indent=2, ensure_ascii=False) + "\n"
        assert record_json(analysis) == expected
