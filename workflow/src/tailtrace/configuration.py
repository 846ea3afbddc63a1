"""Config helpers run before schema validation."""

from __future__ import annotations

from typing import Any

__all__ = ["coerce_cli_values"]


def _coerce(value: Any, schema: dict) -> Any:
    kind = schema.get("type")
    if isinstance(value, str) and kind in ("number", "integer"):
        try:
            number = float(value)
        except ValueError:
            return value  # the schema will reject it with a clear message
        return int(number) if kind == "integer" and number.is_integer() else number
    if isinstance(value, str) and kind == "boolean" and value.lower() in ("true", "false"):
        return value.lower() == "true"
    if isinstance(value, list) and isinstance(schema.get("items"), dict):
        return [_coerce(v, schema["items"]) for v in value]
    if isinstance(value, dict) and "properties" in schema:
        return {k: _coerce(v, schema["properties"].get(k, {})) for k, v in value.items()}
    return value


def coerce_cli_values(config: dict, schema: dict) -> None:
    """Turn numbers and booleans that Snakemake's ``--config`` left as text into values.

    ``--config confidences=[0.99]`` arrives as ``['0.99']``; the schema says
    which keys are numeric, so convert those in place before validation.
    """
    for key, value in list(config.items()):
        config[key] = _coerce(value, schema.get("properties", {}).get(key, {}))
