"""Loading session folders: complete, crashed mid-write, and not a session at all."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from rigloop.analysis.session import SessionError, load_session


def test_a_complete_session_loads_every_column(make_session):
    folder = make_session(duration_s=4.0)
    s = load_session(folder)
    table = pd.read_csv(folder / "samples.csv")       # pandas: the independent reader
    assert s.columns == list(table.columns)
    assert s.n_rows == len(table)
    np.testing.assert_allclose(s.samples["y"], table["y"].to_numpy())
    np.testing.assert_array_equal(s.samples["state"], table["state"].to_numpy(dtype=str))
    assert s.clean_end and s.truncated is None and s.warnings == []
    assert s.outcome == "completed" and s.rig == "bench-fan"
    assert s.output_name == "speed_rpm" and s.output_unit == "rpm"
    assert s.units == {"y": "rpm", "u": "%", "f": "rpm/s"}
    assert s.actuator["min"] == 0.0 and s.actuator["max"] == 100.0


def test_empty_estimate_fields_read_as_nan(make_session):
    s = load_session(make_session(duration_s=2.0, empty_fhat_rows=3))
    first_running = int(np.argmax(s.active_mask()))
    f = s.samples["f_hat"]
    assert np.isnan(f[: first_running + 3]).all() and np.isfinite(f[first_running + 3:]).all()


def test_events_are_parsed_with_numbers_where_numeric(make_session):
    s = load_session(make_session(duration_s=8.0, setpoints=[(6.0, 2000.0, 0.5)]))
    kinds = [ev.kind for ev in s.events]
    assert kinds[:4] == ["connected", "configured", "armed", "running"] and kinds[-1] == "ended"
    assert s.events[0].t is None
    sp = next(ev for ev in s.events if ev.kind == "setpoint")
    assert (sp.t, sp.value, sp.detail) == (6.0, 2000.0, "blend_s=0.5")


def test_a_crashed_session_loads_what_was_written_and_says_so(make_session):
    folder = make_session(duration_s=3.0, cut_last_line=True)
    s = load_session(folder)
    complete_rows = (folder / "samples.csv").read_text().count("\n") - 1
    assert s.n_rows == complete_rows
    assert not s.clean_end
    assert s.truncated.startswith("session ended without a clean stop (outcome: running)")
    assert f"{complete_rows} rows" in s.truncated
    assert any("cut short" in w for w in s.warnings)


def test_a_missing_end_time_is_reported_even_with_an_outcome(make_session):
    folder = make_session(duration_s=1.0)
    text = (folder / "session.yaml").read_text().replace("ended_utc: '2026-12-01T21:50:15.223Z'",
                                                         "ended_utc: null")
    (folder / "session.yaml").write_text(text)
    s = load_session(folder)
    assert s.clean_end and "no ended_utc" in s.truncated


def test_bad_rows_in_the_middle_are_skipped_with_a_warning(make_session):
    folder = make_session(duration_s=1.0)
    lines = (folder / "samples.csv").read_text().splitlines(keepends=True)
    lines[10] = "1.0,2,3\n"
    (folder / "samples.csv").write_text("".join(lines))
    s = load_session(folder)
    assert s.n_rows == len(lines) - 2
    assert any("line 11" in w for w in s.warnings)


def test_the_session_yaml_path_is_accepted_too(make_session):
    folder = make_session(duration_s=1.0)
    assert load_session(folder / "session.yaml").path == folder


def test_a_missing_folder_names_the_path_and_the_fix(tmp_path):
    with pytest.raises(SessionError, match="no such session folder.*session.yaml, samples.csv"):
        load_session(tmp_path / "nope")


def test_a_folder_without_session_yaml_is_refused(tmp_path):
    with pytest.raises(SessionError, match=r"session\.yaml not found"):
        load_session(tmp_path)


def test_garbled_session_yaml_names_the_line(make_session):
    folder = make_session(duration_s=1.0)
    (folder / "session.yaml").write_text("outcome: [completed\nrig: x\n")
    with pytest.raises(SessionError, match=r"session\.yaml: not valid YAML at line \d+"):
        load_session(folder)


def test_missing_samples_file_is_named(make_session):
    folder = make_session(duration_s=1.0)
    (folder / "samples.csv").unlink()
    with pytest.raises(SessionError, match=r"samples\.csv not found"):
        load_session(folder)


def test_a_missing_events_file_only_warns(make_session):
    folder = make_session(duration_s=1.0)
    (folder / "events.csv").unlink()
    s = load_session(folder)
    assert s.events == [] and any("events.csv not found" in w for w in s.warnings)


def test_non_numeric_values_become_nan_with_a_warning(make_session):
    folder = make_session(duration_s=1.0)
    lines = (folder / "samples.csv").read_text().splitlines(keepends=True)
    cells = lines[5].split(",")
    cells[4] = "oops"                                  # the y column
    lines[5] = ",".join(cells)
    (folder / "samples.csv").write_text("".join(lines))
    s = load_session(folder)
    assert math.isnan(s.samples["y"][4])          # line 5 after the header is row 4
    assert any("column 'y'" in w for w in s.warnings)


def test_rejected_frame_total_counts_reasons_not_bookkeeping(make_session):
    folder = make_session(duration_s=1.0)
    s = load_session(folder)
    assert s.rejected_frames_total == 4                  # crc 1 + sequence 3
    s.meta["summary"]["rejected_frames"] = {"accepted": 2966, "crc": 2, "sequence": 0}
    assert s.rejected_frames_total == 2
    s.meta["summary"]["rejected_frames"]["total_rejected"] = 5
    assert s.rejected_frames_total == 5


def test_nan_written_as_text_or_as_an_empty_field_reads_the_same(make_session):
    # the engine writes "nan"; docs/recording.md also allows an empty field
    a = load_session(make_session("empty", duration_s=2.0, nan_text=""))
    b = load_session(make_session("text", duration_s=2.0, nan_text="nan"))
    assert a.columns == b.columns
    for name in a.columns:
        np.testing.assert_array_equal(a.samples[name], b.samples[name])       # NaN == NaN here
    assert np.isnan(b.samples["f_hat"][0]) and a.warnings == b.warnings == []
