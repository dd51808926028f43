"""Run records: atomic writes, CSV formatting, run ids."""

import os

import pytest
from seedsweep.runner.execution import records


def test_atomic_write_replaces_whole_file_and_leaves_no_temp(tmp_path):
    target = tmp_path / "eval.csv"
    records.atomic_write_text(target, "old\n")
    records.atomic_write_text(target, "new\n")
    assert target.read_text() == "new\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["eval.csv"]


def test_failed_atomic_write_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "run.json"
    records.atomic_write_text(target, '{"status": "complete"}\n')

    def crash(src, dst):  # the process dies between writing the temp file and renaming it
        raise OSError("simulated crash before rename")

    monkeypatch.setattr(os, "replace", crash)
    with pytest.raises(OSError, match="simulated crash"):
        records.atomic_write_text(target, '{"status": "running"}\n')
    assert target.read_text() == '{"status": "complete"}\n'
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.json"]


def test_csv_floats_round_trip_exactly():
    text = records.csv_text(("x",), [(0.1 + 0.2,), (1 / 3,)])
    values = [float(v) for v in text.splitlines()[1:]]
    # repr gives the shortest string that round-trips (Python 3.1 "What's New": repr of float)
    assert values == [0.1 + 0.2, 1 / 3]


def test_run_id_ignores_where_results_go_but_not_what_is_run():
    cfg = {"agent": {"name": "dqn", "lr": 0.001}, "env": {"name": "cartpole"}, "seed": 0,
           "sweep": "a", "results_dir": "r1"}
    moved = {**cfg, "sweep": "b", "results_dir": "r2"}
    changed = {**cfg, "agent": {"name": "dqn", "lr": 0.002}}
    assert records.run_id(cfg) == records.run_id(moved)
    assert records.run_id(cfg) != records.run_id(changed)
    assert records.run_id(cfg).startswith("dqn-cartpole-s0-")
