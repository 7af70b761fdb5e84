"""Bounded loading: alias bombs, recursive aliases and deep nesting are refused cheaply (exit 2)."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest
import yaml

from rigloop.config import ConfigError, load_config
from rigloop.config.yaml_source import (MAX_EXPANDED_NODES, DocumentTooLarge, check_bounds,
                                        parse_yaml_value)

# The classic entity-expansion attack ("billion laughs", a well-known XML/YAML denial-of-service
# pattern) written with YAML aliases: nine levels of nine repeats, 9**9 = 387 million leaves.
BOMB = "".join(
    f"{name}: &{name} [{', '.join([f'*{prev}'] * 9) if prev else ', '.join(['lol'] * 9)}]\n"
    for prev, name in zip([None, *"abcdefgh"], "abcdefghi"))
RECURSIVE = "a: &a [*a]\n"


def test_bomb_text_is_what_it_claims():
    node = yaml.compose(BOMB)            # composing shares aliased nodes: cheap
    assert len(node.value) == 9 and BOMB.count("*") == 8 * 9


def test_bound_check_stops_at_the_cap_and_counts_the_expansion_exactly():
    with pytest.raises(DocumentTooLarge, match=f"more than {MAX_EXPANDED_NODES} values"):
        check_bounds(yaml.compose(BOMB))
    # counted as if expanded, without expanding: root mapping 1 + its 2 keys + x: [1, 2] (3)
    # + y: a list (1) holding x three times (3 x 3)
    small = yaml.compose("x: &x [1, 2]\ny: [*x, *x, *x]\n")
    assert check_bounds(small) == 1 + 2 + 3 + 1 + 9


@pytest.mark.parametrize("text, words", [
    (BOMB, "expands to more than"),
    (RECURSIVE, "refers to itself"),
    ("a: " + "[" * 100 + "]" * 100 + "\n", "nested more than"),
    ("a: " + "[" * 5000 + "]" * 5000 + "\n", "nested too deeply"),
])
def test_refused_with_a_config_error(write, text, words):
    with pytest.raises(ConfigError) as caught:
        load_config(write("rig.yaml", text))
    assert words in str(caught.value) and "refused" in str(caught.value)


@pytest.mark.parametrize("text", [BOMB, RECURSIVE])
def test_check_exits_2_in_bounded_memory(tmp_path, text):
    """Run ``check`` in a fresh process and read its peak memory: far below 100 MB.

    Linux's VmHWM (peak resident set of this program image) is used; ru_maxrss would carry the
    forking test runner's own peak over exec. Elsewhere tracemalloc's peak of Python allocations.
    """
    path = tmp_path / "bomb.yaml"
    path.write_text(text, encoding="utf-8")
    probe = textwrap.dedent(f"""
        import sys, tracemalloc
        tracemalloc.start()
        from rigloop.cli import main
        code = main(["check", {str(path)!r}])
        peak_kb = tracemalloc.get_traced_memory()[1] // 1024
        try:
            with open("/proc/self/status") as fh:
                peak_kb = max(peak_kb, *(int(ln.split()[1]) for ln in fh if ln.startswith("VmHWM:")))
        except OSError:
            pass
        print("RESULT", code, peak_kb, file=sys.stderr)
    """)
    proc = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120)
    assert "Traceback" not in proc.stderr
    line = [ln for ln in proc.stderr.splitlines() if ln.startswith("RESULT")][0]
    _, code, peak_kb = line.split()
    assert int(code) == 2
    assert int(peak_kb) < 100 * 1024


def test_set_value_is_bounded_too():
    with pytest.raises(ValueError, match="refers to itself"):
        parse_yaml_value("&a [*a]")
    assert parse_yaml_value("[1, 2]") == [1, 2]


def test_ordinary_aliases_still_work(write):
    text = """
rig: bench-fan
channels: [{name: speed_rpm, unit: rpm}, {name: current_a, unit: A}]
actuator: {name: duty, unit: '%', min: 0.0, max: 100.0, safe: &safe 0.0}
control: {output: speed_rpm, alpha: 30.0, kp: 4.0}
reference: {initial: *safe}
"""
    cfg = load_config(write("rig.yaml", text))
    assert cfg.reference["initial"] == 0.0
