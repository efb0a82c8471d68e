"""``python -m service select`` writes the same JSON the API returns for the same input.

The command runs in a subprocess (as a scheduled job runs it) on a CSV and on a Parquet
file; the API gets the same table through the TestClient.  Invented data: repair costs of
water mains in three districts, generated on the log scale.
"""

from __future__ import annotations

import csv
import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from fastapi.testclient import TestClient
from service.app import app
from service.cli import select_main

ROOT = Path(__file__).resolve().parents[1]
PREDICTORS = ["pipe_length_m", "pipe_age_years", "soil"]
OPTIONS = {
    "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
    "validation": {"folds": 4, "seed": 11},
    "top": 2,
    "units": {"pipe_length_m": "metre"},
}
INCUMBENT = {
    "response": {"column": "repair_cost", "transform": {"name": "identity"}},
    "predictors": [{"column": "pipe_length_m"}, {"column": "pipe_age_years"}, {"column": "soil"}],
}
_ELAPSED = re.compile(r'"elapsed_s":\s*[-0-9.eE+]+')


def _table(n: int = 150) -> dict:
    rng = np.random.default_rng(8)
    length = np.round(np.exp(rng.uniform(math.log(5.0), math.log(400.0), n)), 1)
    age = rng.integers(1, 70, n)
    soil = rng.choice(["clay", "loam", "sand"], n)
    district = rng.choice(["coast", "hills", "valley"], n)
    cost = np.exp(
        4.2
        + 0.7 * np.log(length)
        + 0.01 * age
        + np.where(soil == "clay", 0.2, 0.0)
        + rng.normal(0.0, 0.2, n)
    )
    return {
        "repair_cost": np.round(cost, 2).tolist(),
        "pipe_length_m": length.tolist(),
        "pipe_age_years": [int(a) for a in age],
        "soil": soil.tolist(),
        "district": district.tolist(),
    }


TABLE = _table()


def _canonical(text: str) -> str:
    """The JSON text with timing fields blanked, re-serialised in a fixed key order."""
    return json.dumps(json.loads(_ELAPSED.sub('"elapsed_s": 0', text)), sort_keys=True)


def _command(data: Path, out: Path, *extra: str) -> list[str]:
    return [
        sys.executable,
        "-m",
        "service",
        "select",
        "--data",
        str(data),
        "--response",
        "repair_cost",
        "--predictors",
        ",".join(PREDICTORS),
        "--out",
        str(out),
        *extra,
    ]


@pytest.fixture(scope="module")
def client():
    with TestClient(app, raise_server_exceptions=False) as c:
        yield c


def test_cli_output_equals_the_api_for_csv_and_parquet(tmp_path, client):
    csv_path = tmp_path / "repairs.csv"
    with csv_path.open("w", newline="") as f:
        w = csv.writer(f)
        w.writerow(list(TABLE))
        w.writerows(zip(*TABLE.values(), strict=True))
    pq_path = tmp_path / "repairs.parquet"
    pq.write_table(pa.table(TABLE), pq_path)
    (tmp_path / "options.json").write_text(json.dumps(OPTIONS))
    (tmp_path / "incumbent.json").write_text(json.dumps(INCUMBENT))
    opts = ["--options", str(tmp_path / "options.json")]
    # both jobs start at once (each pays the interpreter's start-up); the API runs meanwhile
    job_csv = subprocess.Popen(
        _command(
            csv_path, tmp_path / "csv.json", *opts, "--incumbent", str(tmp_path / "incumbent.json")
        ),
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    job_pq = subprocess.Popen(
        _command(pq_path, tmp_path / "pq.json", *opts, "--group-by", "district"),
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )

    base = {"response": "repair_cost", "predictors": PREDICTORS, **OPTIONS}
    api_csv = client.post(
        "/v1/selections",
        json={**base, "data": {"csv": csv_path.read_text()}, "incumbent": INCUMBENT},
    )
    api_pq = client.post(
        "/v1/selections",
        json={
            **base,
            "data": {"columns": pq.read_table(pq_path).to_pydict()},
            "group_by": "district",
        },
    )
    assert api_csv.status_code == 200 and api_pq.status_code == 200

    _, err_csv = job_csv.communicate(timeout=120)
    _, err_pq = job_pq.communicate(timeout=120)
    assert job_csv.returncode == 0, err_csv
    assert job_pq.returncode == 0, err_pq
    cli_csv = (tmp_path / "csv.json").read_text()
    cli_pq = (tmp_path / "pq.json").read_text()
    assert _canonical(cli_csv) == _canonical(api_csv.text)
    assert _canonical(cli_pq) == _canonical(api_pq.text)
    # the files hold what a job acts on
    assert json.loads(cli_csv)["incumbent"]["decision"] == "switch"
    assert sorted(json.loads(cli_pq)["groups"]) == ["coast", "hills", "valley"]
    # progress for many groups goes to stderr, never into the JSON
    assert "groups [" in err_pq and "3/3" in err_pq


def _grouped_month(tmp_path) -> list[str]:
    """The month as a CSV file and the options file; the arguments of a grouped run."""
    path = tmp_path / "repairs.csv"
    with path.open("w", newline="") as f:
        w = csv.writer(f)
        w.writerow(list(TABLE))
        w.writerows(zip(*TABLE.values(), strict=True))
    (tmp_path / "options.json").write_text(json.dumps(OPTIONS))
    return [
        "--data",
        str(path),
        "--response",
        "repair_cost",
        "--predictors",
        ",".join(PREDICTORS),
        "--group-by",
        "district",
        "--options",
        str(tmp_path / "options.json"),
        "--out",
        str(tmp_path / "out.json"),
    ]


def test_cli_groups_use_the_worker_process_setting_while_showing_progress(tmp_path, monkeypatch):
    # BESTSCALE_GROUP_PROCESSES applies on the command line too, where --group-by always
    # shows a progress line (the progress once replaced the process mapper by a serial loop)
    import service.selection.workers as workers
    from service.settings import get_settings

    used: list[int] = []
    steps: list[int] = []
    real = workers.process_mapper

    def recording(processes, blas_threads=1, on_result=None):
        def step():
            steps.append(1)
            on_result()  # the progress line

        inner = real(1, blas_threads, step)  # in this process: no start-up cost here

        def mapper(fn, items):
            used.append(processes)
            return inner(fn, items)

        return mapper

    monkeypatch.setattr(workers, "process_mapper", recording)
    monkeypatch.setenv("BESTSCALE_GROUP_PROCESSES", "2")
    get_settings.cache_clear()
    try:
        code = select_main(_grouped_month(tmp_path))
    finally:
        get_settings.cache_clear()
    assert code == 0
    assert used == [2]
    assert len(steps) == 3  # one progress step per group
    assert sorted(json.loads((tmp_path / "out.json").read_text())["groups"]) == [
        "coast",
        "hills",
        "valley",
    ]


def test_cli_reports_a_bad_column_with_its_pointer(tmp_path, capsys):
    path = tmp_path / "repairs.csv"
    path.write_text("repair_cost,pipe_length_m\n10,2\n12,3\n")
    code = select_main(
        [
            "--data",
            str(path),
            "--response",
            "repair_cost",
            "--predictors",
            "pipe_length_m,diameter_mm",
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    # the request's pointer, then our sentence: the same line as the HTTP 422 names
    assert err == (
        "Invalid request content: /predictors/1: predictor column 'diameter_mm' is not in the "
        "data (columns: 'repair_cost', 'pipe_length_m')\n"
    )


def test_cli_reports_a_bad_csv_cell_in_words(tmp_path, capsys):
    path = tmp_path / "repairs.csv"
    path.write_text("repair_cost,pipe_length_m\n10,2\n12,3\n13,x\n")
    code = select_main(
        ["--data", str(path), "--response", "repair_cost", "--predictors", "pipe_length_m"]
    )
    assert code == 2
    # CSV text has no pointer inside it: /data/csv, and the row, line and column in words
    assert capsys.readouterr().err.startswith(
        "Invalid request content: /data/csv: predictor column 'pipe_length_m' mixes numbers "
        "(2) and text (1); data row 3 (line 4), column 'pipe_length_m' holds 'x'."
    )


def test_cli_rejects_an_invalid_option_file(tmp_path, capsys):
    path = tmp_path / "repairs.csv"
    path.write_text("repair_cost,pipe_length_m\n10,2\n12,3\n")
    (tmp_path / "o.json").write_text(json.dumps({"validation": {"folds": 1}}))
    code = select_main(
        [
            "--data",
            str(path),
            "--response",
            "repair_cost",
            "--predictors",
            "pipe_length_m",
            "--options",
            str(tmp_path / "o.json"),
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert "/validation/folds: must be at least 2, got 1" in err
    assert "pydantic" not in err.lower() and "validation error" not in err.lower()


def _select(tmp_path, *extra: str) -> int:
    path = tmp_path / "repairs.csv"
    if not path.exists():
        path.write_text("repair_cost,pipe_length_m\n10,2\n12,3\n")
    return select_main(
        ["--data", str(path), "--response", "repair_cost", "--predictors", "pipe_length_m", *extra]
    )


def test_cli_invalid_input_prints_our_words_not_a_library_dump(tmp_path, capsys):
    opts = tmp_path / "o.json"
    opts.write_text(json.dumps({"top": "five", "validation": {"folds": 3, "seed": "x"}}))
    assert _select(tmp_path, "--options", str(opts)) == 2
    err = capsys.readouterr().err
    assert '/top: expected a whole number such as 5, got "five"' in err
    assert '/validation/seed: expected a whole number such as 5, got "x"' in err
    assert "2 problems" in err
    assert "pydantic" not in err.lower() and "Traceback" not in err

    opts.write_text("{not json")
    assert _select(tmp_path, "--options", str(opts)) == 2
    err = capsys.readouterr().err
    assert f"--options {opts}: is not JSON" in err and "line 1" in err

    opts.write_text("[1, 2]")
    assert _select(tmp_path, "--options", str(opts)) == 2
    assert "needs a JSON object" in capsys.readouterr().err

    opts.write_text(json.dumps({"response": "other"}))
    assert _select(tmp_path, "--options", str(opts)) == 2
    assert "sets response, which the flags set" in capsys.readouterr().err

    assert _select(tmp_path, "--incumbent", str(tmp_path / "absent.json")) == 2
    err = capsys.readouterr().err
    assert f"--incumbent {tmp_path / 'absent.json'}: cannot be read" in err

    code = select_main(
        ["--data", str(tmp_path / "absent.csv"), "--response", "y", "--predictors", "x"]
    )
    assert code == 2
    assert "--data" in capsys.readouterr().err

    with pytest.raises(SystemExit) as stop:
        _select(tmp_path, "--local-workers", "two")
    assert stop.value.code == 2
    assert "expected a whole number such as 5, got 'two'" in capsys.readouterr().err


def _flag_actions(parser):
    return [a for a in parser._actions if a.option_strings and a.dest != "help"]


def test_every_flag_has_help_with_its_default():
    from service.__main__ import serve_parser
    from service.cli import build_parser

    parsers = {"select": build_parser(), "serve": serve_parser("127.0.0.1", 8000, 1)}
    for name, parser in parsers.items():
        actions = _flag_actions(parser)
        assert actions, name
        for action in actions:
            text = action.help or ""
            flag = action.option_strings[0]
            assert len(text) >= 20, (name, flag)  # says what it does
            # the default (or that there is none) is stated
            assert "default" in text or "required" in text, (name, flag, text)
            assert action.required == ("required" in text), (name, flag)


def test_select_help_runs_and_lists_every_flag():
    from service.cli import build_parser

    out = subprocess.run(
        [sys.executable, "-m", "service", "select", "--help"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    for action in _flag_actions(build_parser()):
        assert action.option_strings[0] in out


def test_service_help_lists_the_select_command():
    import subprocess
    import sys

    out = subprocess.run(
        [sys.executable, "-m", "service", "--help"], capture_output=True, text=True, check=True
    ).stdout
    assert "select" in out and "--data" in out and "select --help" in out


def test_cli_groups_count_the_time_limit_from_each_group_start(tmp_path, monkeypatch):
    """A month of segments written to one file is not one request: even when the clock the
    request would share has already run out, every group gets its own time limit (an HTTP
    request with the same clock answers 503 for each group)."""
    import time

    import service.api.options as api_options
    from service.api.schemas import SelectionRequest
    from service.selection.deadline import Deadline

    class Expired:
        @staticmethod
        def after(seconds: float) -> Deadline:
            return Deadline(time.monotonic() - 1.0, seconds)

    monkeypatch.setattr(api_options, "Deadline", Expired)
    code = select_main(_grouped_month(tmp_path))
    assert code == 0
    groups = json.loads((tmp_path / "out.json").read_text())["groups"]
    assert sorted(groups) == ["coast", "hills", "valley"]
    assert not any("problem" in g for g in groups.values())
    req = SelectionRequest.model_validate(
        {
            "data": {"columns": TABLE},
            "response": "repair_cost",
            "predictors": list(PREDICTORS),
            "group_by": "district",
            **OPTIONS,
        }
    )
    from service.api.errors import with_group_problems
    from service.selection.request import run_selection

    job = api_options.selection_job(req)
    body = with_group_problems(run_selection(job, api_options.service()))
    assert all(g["problem"]["status"] == 503 for g in body["groups"].values())


def test_importing_the_command_line_loads_no_numerical_library():
    # source: OpenBLAS reads OPENBLAS_NUM_THREADS once, when the library loads (its README;
    # from memory), so __main__ must set it before anything imports numpy
    code = "import sys, service.__main__ as m, service.cli; m.serve_parser('127.0.0.1', 8000, 1); "
    code += "print(sorted({'numpy', 'scipy', 'pyarrow'} & set(sys.modules)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
