"""The analysis record: an :class:`~reporting.results.Analysis` as JSON, and the published schemas.

The record is the Analysis model dumped in JSON mode, so the schema in ``schemas/`` is generated from
the same classes that compute it. Floats keep full precision; keys keep model order, so the same
study gives the same bytes.
"""

from __future__ import annotations

import json
from typing import Any

from reporting.model import Study
from reporting.results import RECORD_SCHEMA_VERSION, Analysis

SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"
SCHEMA_BASE = "urn:segreport:schemas"  # a name, not a location: the schemas ship in schemas/


def record_dict(analysis: Analysis) -> dict[str, Any]:
    """The record as plain JSON-ready data."""
    return analysis.model_dump(mode="json")


def record_json(analysis: Analysis) -> str:
    """The record as indented JSON text ending in a newline."""
    # pydantic's serializer writes the same JSON data as json.dumps(record_dict(...), indent=2,
    # ensure_ascii=False), several times faster; only the spelling of very small floats can
    # differ (1e-05 vs 0.00001), which JSON readers treat alike.
    return analysis.model_dump_json(indent=2) + "\n"


def record_schema() -> dict[str, Any]:
    """JSON Schema of the analysis record."""
    return {"$schema": SCHEMA_DIALECT, **Analysis.model_json_schema(mode="serialization")}


def study_schema() -> dict[str, Any]:
    """JSON Schema of the study file."""
    return {"$schema": SCHEMA_DIALECT, **Study.model_json_schema(mode="validation")}


def quality_review_schema() -> dict[str, Any]:
    """JSON Schema of ``segreport qa`` output."""
    from reporting.qa.review import QualityReview

    return _published(
        QualityReview.model_json_schema(mode="serialization"), "quality-review-1.schema.json"
    )


def agreement_schema() -> dict[str, Any]:
    """JSON Schema of ``segreport agreement`` output."""
    from reporting.qa.agreement import Agreement

    return _published(Agreement.model_json_schema(mode="serialization"), "agreement-1.schema.json")


def _published(schema: dict[str, Any], name: str) -> dict[str, Any]:
    return {"$schema": SCHEMA_DIALECT, "$id": f"{SCHEMA_BASE}:{name}", **schema}


SCHEMAS = {
    f"record-{RECORD_SCHEMA_VERSION}.schema.json": record_schema,
    "study-1.schema.json": study_schema,
    "quality-review-1.schema.json": quality_review_schema,
    "agreement-1.schema.json": agreement_schema,
}


def schema_text(schema: dict[str, Any]) -> str:
    """Stable text of a schema as committed under ``schemas/``."""
    return json.dumps(schema, indent=2, ensure_ascii=False, sort_keys=False) + "\n"
