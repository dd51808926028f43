"""The coverage notes quote the measured table faithfully and never flatter a design.

Check values: the benchmark output recorded in runner/analysis/coverage.py (printed by
benchmarks/verdict_calibration.py --reps 2000 --seed 0), and the binomial fact that the
percentile interval of a two-run sample is the range of the two runs' bootstrap means, which
covers a symmetric distribution's centre with probability 1/2 (P(both runs on one side) =
2 x 1/4): the measured 0.488-0.500 at 2 seeds on 1 env agree."""

import pytest
from seedsweep.runner.analysis import coverage


def test_two_seeds_on_one_env_cover_about_half_the_time():
    low, high, n, k = coverage.measured_range(2, 1)
    assert (n, k) == (2, 1)
    assert low == pytest.approx(0.5, abs=0.02) and high == pytest.approx(0.5, abs=0.02)


def test_the_note_uses_the_nearest_smaller_measured_design():
    low, high, n, k = coverage.measured_range(4, 2)
    assert (n, k) == (3, 1)  # 4 seeds on 2 envs: measured 3 seeds on 1 env, never larger
    assert (low, high) == (0.743, 0.762)
    note = coverage.coverage_note(4, 2)
    assert "74%-76%" in note and "at or below yours, 4 seeds per env on 2 envs" in note
    assert "90%-90%" not in coverage.coverage_note(5, 2)  # equal ends are written once


def test_no_note_beyond_the_table_or_at_another_level():
    assert coverage.coverage_note(11, 1) is None
    assert coverage.coverage_note(1, 1) is None
    assert coverage.coverage_note(3, 1, confidence=0.9) is None
    assert "93%-94%" in coverage.coverage_note(10, 4, "percentile")
