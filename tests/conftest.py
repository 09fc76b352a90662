"""Shared test helpers: paths and a writer for small method files."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
REFERENCE = Path(__file__).resolve().parent / "reference"
DEMOS = ROOT / "example_inputs"


@pytest.fixture
def write_method(tmp_path):
    """Write a method file (and optional readings) into a temporary folder; return its path."""

    def write(text: str, readings: str | None = None, name: str = "method.toml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        if readings is not None:
            (tmp_path / "readings.csv").write_text(readings, encoding="utf-8")
        return path

    return write
