"""Writing a parsed TOML document back as text, tables inline: enough to feed mutated files to the readers."""

from __future__ import annotations

import datetime as dt
import json
import math
from typing import Any


def toml_value(value: Any) -> str:
    """One TOML value (TOML 1.0: basic strings take JSON's escapes; nan/inf are TOML floats)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value).replace("\x7f", "\\u007f")  # TOML wants DEL escaped, JSON does not
    if isinstance(value, (dt.date, dt.datetime)):
        return value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(f"no TOML for {type(value).__name__}")


def toml_text(doc: dict[str, Any]) -> str:
    """The whole document, one top-level key per line."""
    return "".join(f"{json.dumps(k)} = {toml_value(v)}\n" for k, v in doc.items())
