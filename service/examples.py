"""OpenAPI examples: request bodies read from openapi_examples/<resource>_<scenario>.json."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError


def load_examples(
    directory: Path, resource: str, model: type[BaseModel]
) -> dict[str, dict[str, Any]]:
    """Named examples for ``Body(openapi_examples=...)``; each file must be a valid request."""
    examples: dict[str, dict[str, Any]] = {}
    for path in sorted(directory.glob(f"{resource}_*.json")):
        body = json.loads(path.read_text(encoding="utf-8"))
        try:
            model.model_validate(body)
        except ValidationError as exc:
            raise ValueError(f"example {path} is not a valid {resource} request: {exc}") from exc
        scenario = path.stem.removeprefix(f"{resource}_")
        labels = [line.get("label") for line in body.get("portfolio", {}).get("lines", [])]
        examples[scenario] = {
            "summary": scenario.replace("_", " ").capitalize(),
            "description": "Lines: " + ", ".join(str(label) for label in labels if label),
            "value": body,
        }
    return examples
