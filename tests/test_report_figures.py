"""The report's figures: every run is a dot, colours follow the agent's name, the random and
reference levels stay in view, legends stay off the data.

The sweeps are invented (tests/test_report.py's writer). Check values come from the files
the report writes (scores.csv rows, the SVG that matplotlib writes: one ``<use>`` element
per scatter marker inside the group carrying the artist's gid), matplotlib's own geometry
(``get_window_extent``, ``get_ylim``) and hashlib's SHA-256.
"""

from __future__ import annotations

import hashlib
import json
import xml.etree.ElementTree as ET
from pathlib import Path

import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from seedsweep.runner.analysis.report import compute_report
from seedsweep.runner.commands import options
from seedsweep.runner.commands.report import build_parser
from seedsweep.runner.commands.report import main as report_main
from seedsweep.runner.present import curve_figures, figures, palette
from seedsweep.runner.present.figure_parts import pack_offsets

try:  # pytest puts the rootdir-less tests/ folder itself on sys.path
    from test_report import make_sweep, write_run
except ModuleNotFoundError:  # tests/ imported as a package from the repo root
    from tests.test_report import make_sweep, write_run

SVG = "{http://www.w3.org/2000/svg}"
FAST = ["--resamples", "200", "--quiet"]


def _markers(svg: Path, prefix: str) -> dict[str, list[tuple[float, float]]]:
    """gid -> marker positions of every scatter group whose gid starts with ``prefix``."""
    out = {}
    for group in ET.parse(svg).getroot().iter(f"{SVG}g"):
        gid = group.get("id", "")
        if gid.startswith(prefix):
            out[gid] = [(float(u.get("x")), float(u.get("y"))) for u in group.iter(f"{SVG}use")]
    return out


def _tie_scores(sweep: Path, agent: str, env: str) -> None:
    """Give every run of ``agent`` on ``env`` the eval.csv of its first run: equal scores."""
    folders = sorted(sweep.glob(f"{agent}-{env}-s*"))
    first = (folders[0] / "eval.csv").read_text()
    score = json.loads((folders[0] / "run.json").read_text())["final_score"]
    for folder in folders[1:]:
        (folder / "eval.csv").write_text(first)
        record = json.loads((folder / "run.json").read_text())
        (folder / "run.json").write_text(json.dumps(dict(record, final_score=score)))


def test_every_run_is_one_dot_even_when_scores_tie(tmp_path):
    sweep = make_sweep(tmp_path)  # alpha, beta (+ random) x frozenlake, cartpole x 3 seeds
    _tie_scores(sweep, "alpha", "cartpole")
    assert report_main([str(sweep), *FAST]) == 0
    scores = pd.read_csv(sweep / "report" / "scores.csv")
    tied = scores[(scores.agent == "alpha") & (scores.env == "CartPole-v1")].score
    assert tied.nunique() == 1 and len(tied) == 3  # the three seeds really tie
    dots = _markers(sweep / "report" / "figures" / "agent_scores.svg", "runs:")
    for agent in ("alpha", "beta"):
        for env in ("CartPole-v1", "FrozenLake-v1"):
            n = int(((scores.agent == agent) & (scores.env == env)).sum())
            where = dots[f"runs:{agent}:{env}"]
            assert len(where) == n == 3, (agent, env)
            assert len(set(where)) == n, (agent, env)  # three seeds are three visible dots
    strip = _markers(sweep / "report" / "figures" / "runs_above_threshold.svg", "runs:")
    assert {k: len(v) for k, v in strip.items()} == {"runs:alpha": 6, "runs:beta": 6}


def _fill_colours(svg: Path, gid: str) -> set[str]:
    for group in ET.parse(svg).getroot().iter(f"{SVG}g"):
        if group.get("id") == gid:
            return {s.split("fill:")[1].split(";")[0].strip() for s in
                    (u.get("style", "") for u in group.iter(f"{SVG}use")) if "fill:" in s}
    raise AssertionError(f"no group {gid}")


def test_an_agent_keeps_its_colour_whatever_else_is_in_the_report(tmp_path):
    one = make_sweep(tmp_path / "one", agents=("alpha", "beta"), envs=("cartpole",))
    two = make_sweep(tmp_path / "two", agents=("alpha", "zeta", "beta"), envs=("cartpole",))
    for sweep in (one, two):
        assert report_main([str(sweep), *FAST]) == 0
    colours = {}
    for sweep in (one, two):
        svg = sweep / "report" / "figures" / "agent_scores.svg"
        colours[sweep] = {a: _fill_colours(svg, f"runs:{a}:CartPole-v1")
                          for a in ("alpha", "beta")}
    assert colours[one] == colours[two]
    # derived from the name: SHA-256 (hashlib) of the label picks the palette slot
    for name in ("alpha", "beta", "zeta"):
        digest = int.from_bytes(hashlib.sha256(name.encode()).digest()[:8], "big")
        assert palette.preferred_colour(name) == palette.PALETTE[digest % len(palette.PALETTE)]
    alpha_slot = palette.PALETTE.index(palette.preferred_colour("alpha"))
    assert colours[one]["alpha"] == {palette.PALETTE[alpha_slot].lower()}


def test_colours_ignore_order_keep_random_grey_and_never_clash():
    names = ["dqn", "reinforce", "actor_critic", "ppo", "tile_sarsa", "random", "mine",
             "dqn[lr=0.01]", "random[gamma=0.9]"]
    floor = {"random", "random[gamma=0.9]"}  # the labels of the random floor's runs
    base = palette.agent_colours(names, floor)
    assert palette.agent_colours(list(reversed(names)), floor) == base
    assert palette.agent_colours(sorted(names), floor) == base
    assert base["random"] == base["random[gamma=0.9]"] == palette.RANDOM_GREY
    others = [c for n, c in base.items() if not palette.is_random(n, floor)]
    assert len(set(others)) == len(others)  # 7 agents, 8 colours: no two alike


def _report_data(sweep: Path):
    opts = build_parser().parse_args([str(sweep), "--resamples", "200"])
    return options.with_random_scores(lambda: compute_report(opts))


def test_random_level_and_reference_stay_inside_the_axes(tmp_path):
    """Acrobot-v1: the random agent scores the minimum return, -500 (spec max_episode_steps
    500, reward -1 per step); the reference is the spec's reward_threshold, -100."""
    acrobot = {"name": "acrobot", "id": "Acrobot-v1", "kwargs": {}, "max_episode_steps": None,
               "reference": None, "wrappers": []}
    sweep = tmp_path / "results" / "floor"
    for seed in range(3):
        write_run(sweep, "alpha", "acrobot", seed, -300.0, env_cfg=acrobot)
        write_run(sweep, "random", "acrobot", seed, -500.0, env_cfg=acrobot)
    data = _report_data(sweep)
    ref = data.references["Acrobot-v1"]
    assert ref.reference == -100.0  # gymnasium Acrobot-v1 reward_threshold
    fig = curve_figures.curves_per_env(data, figures.colours_of(data))
    ax = next(a for a in fig.get_axes() if a.get_title(loc="left") == "Acrobot-v1")
    low, high = ax.get_ylim()
    assert low < min(ref.random_low, ref.random) and high > ref.reference
    lows = [data.run_scores[r.run_id][0] for r in data.runs]
    assert low < min(lows)


@pytest.mark.parametrize("name", sorted(figures.FIGURES))
def test_legends_stay_off_the_data(tmp_path, name):
    sweep = make_sweep(tmp_path, agents=("alpha", "beta", "gamma"))
    data = _report_data(sweep)
    fig = figures.FIGURES[name](data, figures.colours_of(data))
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    legends = list(fig.legends) + [a.get_legend() for a in fig.get_axes() if a.get_legend()]
    axes = [a for a in fig.get_axes() if a.get_visible() and a.get_label() != "<colorbar>"]
    for legend in legends:
        box = legend.get_window_extent(renderer)
        for ax in axes:
            assert not box.overlaps(ax.get_window_extent(renderer)), (name, ax.get_title())


def test_report_files_use_the_new_names(tmp_path):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    assert report_main([str(sweep), *FAST]) == 0
    names = {p.stem for p in (sweep / "report" / "figures").iterdir()}
    assert names == set(figures.FIGURES)
    summary = pd.read_json(sweep / "report" / "summary.json", typ="series")
    assert set(summary["figures"]) == set(figures.FIGURES)


def test_pack_offsets_separates_equal_values():
    offsets = pack_offsets([1.0, 1.0, 1.0, 5.0], 0.1, 0.05, 1.0)
    assert len(set(offsets[:3])) == 3 and offsets[3] == 0.0

