"""The wall-time estimate, the order-keeping schedule, the live ETA and the line-mode output."""

import io
import math

import pytest
from rich.console import Console
from seedsweep.runner.launch import display, estimate
from seedsweep.runner.launch.display import SweepProgress
from seedsweep.runner.launch.plan import plan
from seedsweep.runner.launch.schedule import makespan


def test_makespan_places_runs_in_order_on_the_first_free_worker():
    # list scheduling (Graham, 1966), worked by hand: lanes 3 | 3, then 3+2 | 3+2, then 5+2
    assert makespan([3, 3, 2, 2, 2], 2) == 7
    # in order, not longest first: 1 | 1, then 1+4 | 1+4 (longest first would also give 5)
    assert makespan([1, 1, 4, 4], 2) == 5
    # hand-worked: busy workers free at 4 and 1; 2 goes on the second (1+2=3), 2 more on it
    assert makespan([2, 2], 2, busy=[4, 1]) == 5
    assert makespan([], 3, busy=[2.5]) == 2.5


class FakeClock:
    def __init__(self):
        self.now = 1000.0

    def __call__(self):
        return self.now


@pytest.fixture
def clock(monkeypatch):
    fake = FakeClock()
    monkeypatch.setattr(display.time, "monotonic", fake)
    return fake


@pytest.fixture(scope="module")
def ten_runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("ten")
    return plan(["agent=random", "env=cartpole", "seed=range(10)", "steps=1000",
                 "eval.every=500", f"results_dir={folder}", "sweep=t"], multirun=True)


def test_live_eta_scales_the_estimate_by_the_work_done_after_a_fifth(ten_runs, clock):
    ids = [p.run_id for p in ten_runs]
    costs = dict.fromkeys(ids, 10.0)  # the estimate: 10 s a run
    sp = SweepProgress(ten_runs, 2, mode="quiet", costs=costs)
    sp.started(ids[0])
    sp.started(ids[1])
    seconds, basis = sp.eta()
    assert basis == "estimate" and seconds == pytest.approx(50.0)  # 10 runs, 2 lanes, 10 s
    clock.now += 20.0  # the runs really take 20 s each: twice the estimate
    sp.finished(ids[0], "complete")
    sp.finished(ids[1], "complete")
    sp.started(ids[2])
    sp.started(ids[3])
    seconds, basis = sp.eta()
    # a fifth done (2 of 10): scale 20/10; left: two just started (20 s) and 6 pending on
    # 2 lanes (3 x 20 s): 20 + 60 s (worked by hand)
    assert basis == "measured" and seconds == pytest.approx(80.0)


def test_no_eta_and_no_zero_rate_before_anything_is_known(ten_runs, clock):
    sp = SweepProgress(ten_runs, 2, mode="quiet")
    first = sp.summary()
    assert "0 steps/s" not in first and "ETA ?" not in first and "ETA once a fifth" in first


def test_line_mode_prints_one_line_per_run_and_a_status_line_at_most_every_30_s(ten_runs,
                                                                               clock):
    out = io.StringIO()
    sp = SweepProgress(ten_runs, 2, mode="lines", stream=out)
    ids = [p.run_id for p in ten_runs]
    for rid in ids:
        sp.started(rid)
        sp.message({"run_id": rid, "steps": 500, "rate": 1000.0, "eval": None})
        clock.now += 4.0
        sp.refresh()
        sp.finished(rid, "complete")
        sp.refresh()
    lines = out.getvalue().splitlines()
    finished = [line for line in lines if "complete:" in line]
    status = [line for line in lines if "complete:" not in line]
    assert len(finished) == 10 and finished[-1].startswith("seedsweep: [10/10] complete: ")
    assert len(status) == 1  # 40 s of fake time: one status line (at 30 s), not one per event
    assert "steps/s" in status[0] and "ETA" in status[0]


def test_live_table_fits_80_columns_and_keeps_the_step_counter(ten_runs, clock):
    sp = SweepProgress(ten_runs, 2, mode="quiet")
    sp.total_steps = dict.fromkeys(sp.total_steps, 1_000_000)
    for p in ten_runs[:2]:
        sp.started(p.run_id)
        sp.message({"run_id": p.run_id, "steps": 999_999, "rate": 12345.0,
                    "eval": (-1234.5, 123.4)})
    console = Console(width=200, record=True, file=io.StringIO())
    console.print(sp._table())
    text = console.export_text()
    assert max(len(line) for line in text.splitlines()) <= 80
    assert text.count("999,999/1,000,000") == 2
    assert "± s.e." in text


def test_estimate_counts_training_evaluation_and_start_up(ten_runs):
    p = ten_runs[0]  # 1000 steps, an evaluation at 500 and at 1000, 10 episodes each
    pair = estimate.PairCost(train_s=1e-3, eval_s=1e-4, eval_length=50.0)
    cost = estimate.run_cost(p, pair, startup_s=0.5)
    # 0.5 s start-up + 1000 x 1 ms training + 2 x 10 x 50 evaluation steps x 0.1 ms
    assert cost == pytest.approx(0.5 + 1.0 + 0.1)


def test_estimate_calibrates_then_uses_earlier_runs_and_says_which(ten_runs, tmp_path,
                                                                   monkeypatch):
    monkeypatch.setenv("SEEDSWEEP_CACHE", str(tmp_path / "cache"))
    first = estimate.estimate(ten_runs, 2)
    assert first.basis == {"earlier runs": 0, "calibration": 1}
    assert "from calibration" in first.line() and "default" in first.line()
    assert all(math.isfinite(c) and c > 0 for c in first.costs.values())
    estimate.remember(ten_runs[0], estimate.PairCost(1e-3, 1e-4, 20.0))
    estimate.remember_startup([0.2, 0.3, 0.4])
    second = estimate.estimate(ten_runs, 2)
    assert second.basis == {"earlier runs": 1, "calibration": 0}
    assert second.startup_s == pytest.approx(0.3) and "measured by earlier sweeps" in second.line()
    # 10 runs of 0.3 + 1.0 + 2 x 10 x 20 x 1e-4 = 1.34 s on 2 lanes, plus the server's start
    assert second.wall_s == pytest.approx(estimate.SERVER_START_S + 5 * 1.34)


def test_a_single_runs_lines_never_say_zero_steps_per_second():
    out = io.StringIO()
    progress = display.RunProgress("r", 1000, mode="lines", stream=out, line_every_s=0.0)
    progress.update(0, 0.0)  # nothing measured yet: no line
    assert out.getvalue() == ""
    progress.update(500, 250.0)
    assert "250 steps/s | ETA 0:00:02" in out.getvalue()  # (1000 - 500) / 250 = 2 s
