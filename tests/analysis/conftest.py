"""Fixtures of the analysis tests (the data generator is in analysis_testdata.py)."""

from __future__ import annotations

from pathlib import Path

import pytest

from analysis_testdata import write_session


@pytest.fixture
def make_session(tmp_path):
    """Factory: ``make_session(name="s1", **options)`` -> session folder path."""
    def factory(name: str = "20261201-215005_bench-fan", **options) -> Path:
        return write_session(tmp_path / name, **options)
    return factory
