"""Settings: one schema (sheetfit.job.SCHEMA) checks the job file, the API's keywords and the CLI's
values — a wrong type or a value out of range is one JobError line naming the key, the expected type
and the value found, never a TypeError from deep inside a run."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import sheetfit
from sheetfit.cli import app
from sheetfit.errors import JobError
from sheetfit.job import (
    SCHEMA,
    FitJob,
    Thresholds,
    check_setting,
    job_file_settings,
    load_job_file,
    make_job,
)

BASE = 'y = "kWh"\nx = ["Temp"]\n'


def job_file(tmp_path, text: str):
    path = tmp_path / "job.toml"
    path.write_text(text, encoding="utf-8")
    return path


WRONG_TYPES = [
    ('alpha = "high"', "alpha", '"high" (text)'),
    ('max_charts = "many"', "max_charts", '"many" (text)'),
    ('header_row = "two"', "header_row", '"two" (text)'),
    ("header_row = 1.5", "header_row", "1.5"),
    ('max_unpacked_bytes = "x"', "max_unpacked_bytes", '"x" (text)'),
    ("group = [1, 2]", "group", "[1, 2]"),
    ("order = 5", "order", "5"),
    ("workbook = 3", "workbook", "3"),
    ("sheets = 1", "sheets", "1"),
    ('overwrite = "false"', "overwrite", '"false" (text)'),
    ('intercept = "no"', "intercept", '"no" (text)'),
    ("strict = 1", "strict", "1"),
    ('adjust = "sometimes"', "adjust", '"sometimes" (text)'),
    ("table = []", "table", "[]"),
    ("level = 1.0", "level", "1.0"),
    ("alpha = nan", "alpha", "nan"),
    ("vif_max = inf", "vif_max", "inf"),
    ("hac_lags = -1", "hac_lags", "-1"),
    ("bg_lags = 0", "bg_lags", "0"),
    ("[thresholds]\nstudentized-cutoff = nan", "studentized_cutoff", "nan"),
]


@pytest.mark.parametrize("line, key, found", WRONG_TYPES)
def test_job_file_values_of_the_wrong_type_or_range_are_one_line(tmp_path, line, key, found):
    path = job_file(tmp_path, BASE + line + "\n")
    with pytest.raises(JobError) as err:
        load_job_file(path)
    msg = str(err.value)
    assert "\n" not in msg
    assert f'job file job.toml: setting "{key}"' in msg
    assert f" must be {SCHEMA[key].expected()}; found {found}" in msg


def test_x_as_a_list_is_refused_as_a_number(tmp_path):
    with pytest.raises(JobError, match=r'setting "x" \(--x\) must be a list of non-empty texts .*found 1$'):
        load_job_file(job_file(tmp_path, 'y = "kWh"\nx = 1\n'))


def test_one_text_stands_for_a_list_of_one(tmp_path):
    settings = load_job_file(job_file(tmp_path, 'workbook = "in.xlsx"\ny = "kWh"\nx = "Temp"\ngroup = "Site"\n'))
    job = make_job(settings)
    assert (job.x, job.group) == (("Temp",), ("Site",))


def test_booleans_must_be_real_booleans(tmp_path):
    with pytest.raises(JobError, match="without quotes"):
        load_job_file(job_file(tmp_path, BASE + 'overwrite = "false"\n'))
    with pytest.raises(JobError, match=r'"intercept" \(--no-intercept\) must be true or false; found "no"'):
        make_job({"workbook": "in.xlsx", "y": "y", "x": ["x"], "intercept": "no"})
    assert make_job({"workbook": "in.xlsx", "y": "y", "x": ["x"], "intercept": False}).intercept is False


def test_unknown_key_names_the_closest(tmp_path):
    with pytest.raises(JobError, match='unknown setting "aplha"; closest known setting: "alpha"'):
        load_job_file(job_file(tmp_path, BASE + "aplha = 0.1\n"))
    with pytest.raises(JobError, match='unknown setting "colour"'):
        load_job_file(job_file(tmp_path, BASE + 'colour = "blue"\n'))
    with pytest.raises(JobError, match=r"unknown table \[thresolds\]; .*\[thresholds\]"):
        load_job_file(job_file(tmp_path, BASE + "[thresolds]\nalpha = 0.1\n"))


def test_a_key_given_twice_is_refused(tmp_path):
    with pytest.raises(JobError, match='"alpha" is given twice'):
        load_job_file(job_file(tmp_path, BASE + "alpha = 0.1\n[thresholds]\nalpha = 0.2\n"))


def test_job_path_that_is_a_folder_or_missing(tmp_path):
    (tmp_path / "job.toml").mkdir()
    with pytest.raises(JobError, match="is a folder"):
        load_job_file(tmp_path / "job.toml")
    with pytest.raises(JobError, match="not found"):
        load_job_file(tmp_path / "missing.toml")


def test_relative_paths_are_taken_from_the_job_files_folder(tmp_path):
    (tmp_path / "jobs").mkdir()
    path = tmp_path / "jobs" / "job.toml"
    path.write_text('workbook = "data/in.xlsx"\nout = "/abs/out.xlsx"\ny = "y"\nx = "x"\n', encoding="utf-8")
    settings = job_file_settings(path)
    assert settings["workbook"] == str(tmp_path / "jobs" / "data" / "in.xlsx")
    assert settings["out"] == "/abs/out.xlsx"


# ── the same schema behind the Python API's keywords ──

@pytest.mark.parametrize("kw, key", [({"alpha": "high"}, "alpha"), ({"x": 1}, "x"), ({"group": [1, 2]}, "group"),
                                     ({"overwrite": "false"}, "overwrite"), ({"sheet": 1}, "sheets"),
                                     ({"max_charts": 2.5}, "max_charts"), ({"vif_max": math.nan}, "vif_max")])
def test_api_keywords_are_checked_the_same_way(tmp_path, kw, key):
    args = {"y": "y", "x": "x", **kw}
    with pytest.raises(JobError, match=f'setting "{key}"'):
        sheetfit.fit_workbook(tmp_path / "never-read.xlsx", **args)


def test_api_unknown_keyword_names_the_closest(tmp_path):
    with pytest.raises(JobError, match='closest known setting: "min_r2"'):
        sheetfit.fit_workbook(tmp_path / "never-read.xlsx", y="y", x="x", min_r=0.2)


def test_fit_frame_checks_before_reading():
    frame = pd.DataFrame({"a": [1.0, 2.0, 3.0], "b": [1.0, 2.0, 4.0]})
    with pytest.raises(JobError, match='setting "x"'):
        sheetfit.fit_frame(frame, y="a", x=1)
    with pytest.raises(JobError, match='setting "level"'):
        sheetfit.fit_frame(frame, y="a", x="b", level="high")


# ── every number finite and in range ──

NUMBERS = [k for k, s in SCHEMA.items() if s.kind in ("int", "number")]


@pytest.mark.parametrize("key", NUMBERS)
@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf, True, "1", -1e9, -(10**400)])
def test_every_number_is_finite_and_in_range(key, bad):
    with pytest.raises(JobError, match=f'setting "{key}"'):
        check_setting(key, bad)


@pytest.mark.parametrize("key, good", [("alpha", 0.01), ("level", 0.5), ("min_r2", 0.0), ("min_r2", 1.0),
                                       ("hac_lags", 0), ("bg_lags", np.int64(3)), ("header_row", 2.0),
                                       ("vif_max", np.float32(5.0))])
def test_numbers_in_range_pass(key, good):
    value = check_setting(key, good)
    assert value == good and not isinstance(value, (bool, np.generic))


def test_the_dataclasses_validate_with_the_schema():
    with pytest.raises(JobError, match='"vif_max"'):
        Thresholds(vif_max=math.nan).validate()
    with pytest.raises(JobError, match='"max_charts"'):
        FitJob(workbook="in.xlsx", y="y", x=("x",), max_charts=-1).validate()


def test_schema_describes_every_field():
    assert set(SCHEMA) == {f for f in FitJob.__dataclass_fields__ if f != "thresholds"} | set(
        Thresholds.__dataclass_fields__)
    for key, spec in SCHEMA.items():
        assert spec.description and spec.expected(), key


# ── the command line ──

runner = CliRunner()


@pytest.mark.parametrize("option, value", [("--vif-max", "nan"), ("--studentized-cutoff", "nan"),
                                           ("--rows-per-coefficient", "inf"), ("--condition-max", "-inf"),
                                           ("--cooks-factor", "0"), ("--leverage-factor", "nan"),
                                           ("--min-r2", "nan"), ("--alpha", "nan"), ("--level", "inf"),
                                           ("--hac-lags", "-1"), ("--bg-lags", "0"), ("--max-charts", "-1"),
                                           ("--header-row", "0"), ("--max-unpacked-mb", "0")])
def test_cli_refuses_non_finite_and_out_of_range_numbers(tmp_path, option, value):
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X", option, value])
    assert result.exit_code == 1, result.output
    assert result.stderr.count("\n") == 1 and result.stderr.startswith("sheetfit: error: ")
    assert option in result.stderr


def test_cli_job_file_with_a_wrong_type_is_one_line(tmp_path):
    path = job_file(tmp_path, BASE + 'max_charts = "many"\n')
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--job", str(path)])
    assert result.exit_code == 1
    assert result.stderr == ('sheetfit: error: job file job.toml: setting "max_charts" (--max-charts) must be '
                             'a whole number 0 or more; found "many" (text)\n')


# ── the about sheet lists each setting once ──

def test_about_lists_every_setting_once():
    rng = np.random.default_rng(4)
    df = pd.DataFrame({"g": np.repeat(["a", "b"], 15), "x": rng.uniform(0, 5, 30)})
    df["y"] = 2 + df["x"] + rng.normal(0, 0.1, 30)
    res = sheetfit.fit_frame(df, y="y", x="x", group="g", intercept=False)
    names = [str(k).removeprefix("setting: ") for k, _ in res.about]
    assert len(names) == len(set(names)), sorted(n for n in names if names.count(n) > 1)
    about = dict(res.about)
    assert about["intercept"] == "no"
    assert about["setting: overwrite"] == "no"


def test_cli_job_path_that_is_a_folder_is_one_line(tmp_path):
    (tmp_path / "job.toml").mkdir()
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X",
                                 "--job", str(tmp_path / "job.toml")])
    assert result.exit_code == 1
    assert result.stderr.count("\n") == 1 and "is a folder" in result.stderr


def test_texts_keep_their_spaces_and_an_empty_optional_text_is_the_default():
    assert check_setting("csv_delimiter", "\t") == "\t"
    assert check_setting("csv_delimiter", " ") == " "
    assert check_setting("csv_decimal", "") is None
    with pytest.raises(JobError, match='setting "y"'):
        check_setting("y", "")
