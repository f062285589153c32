"""Helpers for tests that hold a command's JSON output to the keys its --help lists."""

from __future__ import annotations

import re


def documented_json_keys(help_text: str, filler: set[str] = frozenset()) -> set[str]:
    """The words of the help's ``JSON keys:`` paragraph that name keys (``filler`` words left out)."""
    paragraph = help_text.split("JSON keys:", 1)[1].split("\n\n", 1)[0]
    return set(re.findall(r"[a-z][a-z0-9_]*", paragraph)) - set(filler)


def all_keys(data: object) -> set[str]:
    """Every key at any depth of a JSON document."""
    if isinstance(data, dict):
        return set(data) | {k for v in data.values() for k in all_keys(v)}
    if isinstance(data, list):
        return {k for v in data for k in all_keys(v)}
    return set()
