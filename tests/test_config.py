"""Config validation: every problem names the file, the key path, what was found and what was expected.

The expectations are the documented config format (README.md, "Configuration
reference"); the TOML grammar is TOML v1.0.0 (toml.io).
"""
from __future__ import annotations

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pipelines.cli import main
from pipelines.config import load_config
from pipelines.errors import EXIT_CONFIG, ConfigError

GOOD = """
[pipeline]
name = "t"
record_kind = "tracking"
inputs = ["raw/*.parquet"]

[[stages]]
use = "time_scales"
"""


@pytest.fixture
def raw_dir(tmp_path):
    (tmp_path / "raw").mkdir()
    pq.write_table(pa.table({"x": [1]}), tmp_path / "raw" / "a.parquet")
    return tmp_path / "raw"


def problems(path, **kw):
    with pytest.raises(ConfigError) as ei:
        load_config(path, **kw)
    return ei.value.lines()


def test_good_config_resolves_defaults(write_config, raw_dir):
    cfg = load_config(write_config(GOOD))
    assert cfg.stages[0].params == {"grid_step_s": 3600.0, "tdb_site": "auto"}
    assert cfg.models["eop_beyond_table"] == "flag"
    assert cfg.batch_rows == 65536
    assert [p for p, _ in cfg.partitions()] == ["a"]


def test_toml_syntax_error_names_file_line_and_column(write_config, raw_dir):
    path = write_config('[pipeline]\nname = "t\n')
    (line,) = problems(path)
    assert line.startswith(str(path)) and "TOML syntax error" in line and "line 2" in line and "column" in line


@pytest.mark.parametrize(
    "text, key, words",
    [
        (GOOD + "\n[extra]\nx = 1\n", "extra", "unknown table"),
        (GOOD.replace('name = "t"', 'name = "t"\nbatch_size = 5'), "pipeline.batch_size", "unknown key"),
        (GOOD.replace('record_kind = "tracking"', 'record_kind = "laser"'), "pipeline.record_kind", "found 'laser', expected one of 'tracking', 'clock'"),
        (GOOD.replace('name = "t"', 'name = "t"\nbatch_rows = "many"'), "pipeline.batch_rows", "found 'many', expected an integer"),
        (GOOD.replace('name = "t"', 'name = "t"\nbatch_rows = 10'), "pipeline.batch_rows", "found 10, expected an integer in [1000, 4000000]"),
        (GOOD.replace('name = "t"', 'name = "t"\nbatch_rows = true'), "pipeline.batch_rows", "found True"),
        (GOOD.replace('name = "t"\n', ""), "pipeline.name", "missing"),
        (GOOD.replace('inputs = ["raw/*.parquet"]', "inputs = []"), "pipeline.inputs", "non-empty array"),
        (GOOD + 'grid_step_s = 7200.0\n', "stages[1].grid_step_s", "found 7200.0, expected a number in [60.0, 3600.0] (s)"),
        (GOOD + 'grid_step_s = "1h"\n', "stages[1].grid_step_s", "found '1h', expected a number"),
        (GOOD + "wobble = 1\n", "stages[1].wobble", "unknown key"),
        (GOOD.replace('use = "time_scales"', 'use = "time_travel"'), "stages[1].use", "found 'time_travel', expected one of the installed stages"),
        (GOOD + "\n[[stages]]\nuse = \"time_scales\"\n", "stages[2].use", "appears twice"),
        (GOOD + '\n[models]\neop_beyond_table = "ignore"\n', "models.eop_beyond_table", "expected one of 'flag', 'quarantine'"),
        (GOOD.replace("raw/*.parquet", "nowhere/*.parquet"), "pipeline.inputs[1]", "matches no file"),
    ],
)
def test_each_problem_names_file_key_found_expected(write_config, raw_dir, text, key, words):
    path = write_config(text)
    lines = problems(path)
    hits = [ln for ln in lines if ln.startswith(f"{path}: {key}:")]
    assert hits, lines
    assert words in hits[0], hits[0]


def test_all_problems_reported_together(write_config, raw_dir):
    text = GOOD.replace('record_kind = "tracking"', 'record_kind = 3') + "wobble = 1\n"
    lines = problems(write_config(text))
    assert any("pipeline.record_kind" in ln for ln in lines) and any("stages[1].wobble" in ln for ln in lines)


def test_stage_requiring_a_column_no_earlier_step_provides(write_config, raw_dir, plugin_on_path):
    # range_in_metres needs tt_sod_s, which only time_scales provides: placed first, it must be refused.
    text = GOOD.replace('use = "time_scales"', 'use = "range_in_metres"') + '\n[[stages]]\nuse = "time_scales"\n'
    lines = problems(write_config(text))
    assert any("stages[1].use" in ln and "requires column 'tt_sod_s', which no earlier step provides" in ln for ln in lines), lines


def test_stage_of_another_record_kind_is_refused(write_config, raw_dir, plugin_on_path):
    text = GOOD.replace('"tracking"', '"clock"') + '\n[[stages]]\nuse = "range_in_metres"\n'
    lines = problems(write_config(text))
    assert any("stages[2].use" in ln and "accepts record kinds tracking" in ln for ln in lines), lines


def test_missing_file_and_directory(tmp_path):
    assert problems(tmp_path / "absent.toml") == [f"{tmp_path / 'absent.toml'}: file not found"]
    assert "is a directory" in problems(tmp_path)[0]


def test_cli_reports_config_errors_in_one_line_each_without_traceback(write_config, raw_dir, capsys):
    path = write_config(GOOD + "wobble = 1\n")
    assert main(["check", str(path)]) == EXIT_CONFIG
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert err.strip() == f"{path}: stages[1].wobble: unknown key; expected one of: grid_step_s, tdb_site"


def test_check_prints_plan_with_defaults_and_fingerprints(write_config, raw_dir, capsys):
    path = write_config(GOOD)
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "grid_step_s = 3600.0" in out and "tdb_site = 'auto'" in out
    assert "partition a:" in out and "configuration OK" in out


def test_stages_command_lists_builtin_and_plugin_stages(plugin_on_path, capsys):
    assert main(["stages"]) == 0
    out = capsys.readouterr().out
    assert "time_scales@1" in out and "Fairhead & Bretagnon 1990" in out and "grid_step_s = 3600.0" in out
    assert "range_in_metres@1" in out and "17th CGPM (1983)" in out
