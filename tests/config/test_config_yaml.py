"""Reading the file: syntax errors with line and column, duplicates, encodings, empty files."""

from __future__ import annotations

import pytest
import yaml
from config_testdata import base

from rigloop.config import ConfigError, load_config


def error_of(path) -> ConfigError:
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    return caught.value


def test_valid_file_loads(write):
    cfg = load_config(write("rig.yaml", yaml.safe_dump(base())))
    assert cfg.rig == "bench-fan" and cfg.source_path is not None


def test_syntax_error_names_line_and_column(write):
    path = write("rig.yaml", "rig: a\ncontrol:\n  kp: 1\n kd: 2\n")
    text = str(error_of(path))
    assert "line 4, column 2" in text and "YAML syntax error" in text


def test_tab_indentation_gets_a_hint(write):
    text = str(error_of(write("rig.yaml", "rig: a\ncontrol:\n\tkp: 1\n")))
    assert "line 3" in text and "tab" in text


def test_unclosed_bracket(write):
    text = str(error_of(write("rig.yaml", "rig: a\nchannels: [{name: x}\n")))
    assert "YAML syntax error" in text and "line" in text


def test_duplicate_keys_are_errors_with_both_lines(write):
    text = str(error_of(write("rig.yaml", "rig: a\ncontrol: {kp: 1}\nrig: b\n")))
    assert "rig: written twice (lines 1 and 3)" in text


def test_duplicate_keys_in_nested_mappings(write):
    err = error_of(write("rig.yaml", "control:\n  kp: 1\n  kp: 2\n"))
    assert [p.key for p in err.problems] == ["control.kp"]


def test_missing_file_and_folder(tmp_path):
    assert "not found" in str(error_of(tmp_path / "nope.yaml"))
    assert "is a folder" in str(error_of(tmp_path))


@pytest.mark.parametrize("text, expected", [
    ("", "empty"),
    ("# only a comment\n", "empty"),
    ("- rig\n- channels\n", "must be a mapping"),
    ("just text\n", "must be a mapping"),
])
def test_empty_or_non_mapping_file(write, text, expected):
    assert expected in str(error_of(write("rig.yaml", text)))


def test_not_utf8(tmp_path):
    path = tmp_path / "rig.yaml"
    path.write_bytes(b"rig: caf\xe9\n")
    assert "not UTF-8" in str(error_of(path))


def test_exponent_numbers_read_as_numbers_and_bom_is_fine(write):
    text = yaml.safe_dump(base()) + "limits:\n  speed_rpm: {max: 3.3e3, rate_max: 1e5}\n"
    cfg = load_config(write("rig.yaml", "\ufeff" + text))
    assert cfg.limits.channels["speed_rpm"].max == 3300.0
    assert cfg.limits.channels["speed_rpm"].rate_max == 100000.0


def test_problems_point_at_the_line_and_go_in_file_order(write):
    text = yaml.safe_dump(base(), sort_keys=False) + "recording: {flush_ms: 0}\nduration_s: -1\n"
    lines = error_of(write("rig.yaml", text)).lines()
    n = len(text.splitlines())
    assert lines[0].startswith("recording.flush_ms = 0:") and f"line {n - 1})" in lines[0]
    assert lines[1].startswith("duration_s = -1:") and f"line {n})" in lines[1]
