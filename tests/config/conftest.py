"""Fixtures of the configuration tests: an in-process CLI runner and a file writer."""

from __future__ import annotations

import pytest


@pytest.fixture
def run_cli(capsys):
    """Run ``rigloop ...`` in-process; return (exit code, stdout, stderr)."""
    from rigloop.cli import main

    def _run(*argv: str) -> tuple[int, str, str]:
        code = main(list(argv))
        out = capsys.readouterr()
        return code, out.out, out.err

    return _run


@pytest.fixture
def write(tmp_path):
    """Write a text file under tmp_path and return its path."""

    def _write(name: str, text: str):
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
        return path

    return _write
