"""Helpers for tests of file readers: one edit to a shipped file, and its one error line."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from fixture.files.toml_reader import FileProblems


def edited_copy(original: Path, tmp_path: Path, old: str, new: str) -> Path:
    """``original`` with the first ``old`` replaced by ``new``, written under ``tmp_path``."""
    text = original.read_text(encoding="utf-8")
    assert old in text, f"test setup: {old!r} not in {original}"
    path = tmp_path / original.name
    path.write_text(text.replace(old, new, 1), encoding="utf-8")
    return path


def only_problem(load: Callable[[Path], object], path: Path) -> str:
    """The single problem line ``load`` reports for ``path`` (fails if there are more or none)."""
    with pytest.raises(FileProblems) as info:
        load(path)
    lines = str(info.value).splitlines()
    assert len(lines) == 1, lines
    return lines[0]
