"""What the report page and the terminal say: 0 and 1 explained, "95% CI" never a bare "CI",
the median left out where it equals the mean, one random score, each pair once, zero-width
intervals flagged, tuning records shown, the next steps.

The sweeps are invented (tests/test_report.py's writer). Check values: Python's
``html.parser`` for the page's tables, ``math.comb`` for the number of agent pairs, the
issue's wording for the phrases, and the numbers the report itself wrote (summary.json).
"""

from __future__ import annotations

import json
import math
import re
from html.parser import HTMLParser
from pathlib import Path

from seedsweep.runner.analysis.report import compute_report
from seedsweep.runner.commands import options
from seedsweep.runner.commands.report import build_parser
from seedsweep.runner.commands.report import main as report_main
from seedsweep.runner.present import html, report_files
from seedsweep.runner.present.verdict_html import verdict_block

try:  # pytest puts the rootdir-less tests/ folder itself on sys.path
    from test_report import make_sweep
except ModuleNotFoundError:  # tests/ imported as a package from the repo root
    from tests.test_report import make_sweep

FAST = ["--resamples", "200"]
BARE_CI = re.compile(r"(?<!% )\bCI\b")


class Tables(HTMLParser):
    """Every table of a page as {section id: [rows of cell texts]} (header row first), and
    the text-align class of every cell."""

    def __init__(self) -> None:
        super().__init__()
        self.sections: dict[str, list[list[list[str]]]] = {}
        self.align: list[tuple[str, str]] = []  # (tag, class)
        self._section = ""
        self._row: list[str] | None = None
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self._section = a.get("id", "")
        elif tag == "table":
            self.sections.setdefault(self._section, []).append([])
        elif tag == "tr":
            self._row = []
        elif tag in ("td", "th"):
            self._cell = []
            self.align.append((tag, a.get("class", "")))

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.sections[self._section][-1].append(self._row)
            self._row = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _tables(page: str) -> Tables:
    parser = Tables()
    parser.feed(page)
    return parser


def _report(sweep: Path, capsys, *extra: str) -> tuple[str, str, dict]:
    assert report_main([str(sweep), *FAST, "--no-figures", *extra]) == 0
    out = capsys.readouterr().out
    page = (sweep / "report" / "report.html").read_text()
    summary = json.loads((sweep / "report" / "summary.json").read_text())
    return out, page, summary


def test_terminal_says_what_the_numbers_mean_and_what_to_do_next(tmp_path, capsys):
    sweep = make_sweep(tmp_path)  # 2 envs
    out, _, _ = _report(sweep, capsys)
    assert "0 = the random agent" in out and "1 = the reference" in out
    assert "lower is better" in out
    assert "95% CI" in out and not BARE_CI.search(out)
    # with 2 envs the median of the two per-env means is their mean: not a column
    header = next(line for line in out.splitlines() if "IQM" in line)
    assert "median" not in header and "median not shown: with 2 envs" in out
    page = (sweep / "report" / "report.html").resolve()
    assert page.as_uri() in out and page.is_file()
    assert f"seedsweep report {sweep} --candidate alpha" in out

    three = make_sweep(tmp_path / "three", envs=("frozenlake", "cartpole", "pendulum"))
    for path in three.glob("*-pendulum-*/config.yaml"):  # Pendulum-v1 has no threshold
        path.write_text(path.read_text().replace("reference: null", "reference: -150.0"))
    out, page_text, _ = _report(three, capsys)
    assert "median" in next(line for line in out.splitlines() if "IQM" in line)
    assert "median not shown" not in out and "median not shown" not in page_text


def test_comparison_ends_with_how_many_seeds_to_plan(tmp_path, capsys):
    sweep = make_sweep(tmp_path)
    out, page, _ = _report(sweep, capsys, "--candidate", "alpha")
    assert "vs beta: " in out and "evidence: alpha 0.05" in out  # the verdict table
    verdict = json.loads((sweep / "report" / "compare.json").read_text())["comparisons"][0]
    planned = f"seedsweep plan-seeds {sweep} --candidate alpha --baseline beta" in out
    # a settled verdict needs no more seeds; an open one says how to plan them
    assert planned == (verdict["verdict"] not in ("better", "worse")), verdict["verdict"]
    assert ("seedsweep plan-seeds" in page) == planned
    assert not BARE_CI.search(out)


def test_page_tables_are_aligned_and_each_pair_is_listed_once(tmp_path, capsys):
    sweep = make_sweep(tmp_path, agents=("alpha", "beta", "gamma", "delta"))
    _, page, summary = _report(sweep, capsys)
    tables = _tables(page)
    pairs = tables.sections["pairs"][0]
    assert len(pairs) - 1 == math.comb(4, 2)  # header row + one row per unordered pair
    assert len({frozenset(r[:2]) for r in pairs[1:]}) == math.comb(4, 2)
    assert len(summary["probability_of_improvement"]) == 2 * math.comb(4, 2)
    # numbers right, text left, headers like their columns
    scores = page[page.index("<section id='scores'>"):page.index("</section>",
                                                               page.index("id='scores'"))]
    head = re.findall(r'<th class="(\w)">', scores)
    first_row = re.findall(r'<td class="(\w)">', scores)[:len(head)]
    assert head == first_row and head[0] == "l" and set(head[1:]) == {"r"}
    assert "aggregates_s" not in page and "n_scores" not in page  # timing in words
    provenance = tables.sections["provenance"][0]
    assert "code_version" in [row[0] for row in provenance]


def test_one_random_score_across_page_and_terminal(tmp_path, capsys):
    sweep = make_sweep(tmp_path)
    out, page, summary = _report(sweep, capsys)
    for env, ref in summary["references"].items():
        low, high = ref["random_ci"]
        shown = f"{ref['random']:.4g} [{low:.4g}, {high:.4g}]"
        assert shown in out
        cells = [c for table in _tables(page).sections["per-env"] for row in table
                 for c in row if c.startswith(f"{ref['random']:.4g}")]
        assert len(cells) == 2 and all(c.replace("\xa0", " ").startswith(
            f"{ref['random']:.4g} [{low:.4g}, {high:.4g}]") for c in cells), env
        iqm = summary["per_env"]["random"][env]
        other = f"{iqm['point']:.4g} [{iqm['low']:.4g}, {iqm['high']:.4g}]"
        if other != shown:  # the random agent's IQM over seeds is a second number: not shown
            assert other not in page


def _tie(sweep: Path, agent: str, env: str) -> None:
    """Every run of ``agent`` on ``env`` gets the records of its first run: equal scores."""
    folders = sorted(sweep.glob(f"{agent}-{env}-s*"))
    first = (folders[0] / "eval.csv").read_text()
    score = json.loads((folders[0] / "run.json").read_text())["final_score"]
    for folder in folders[1:]:
        (folder / "eval.csv").write_text(first)
        record = json.loads((folder / "run.json").read_text())
        (folder / "run.json").write_text(json.dumps(dict(record, final_score=score)))


def test_zero_width_intervals_are_flagged(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    _tie(sweep, "alpha", "cartpole")
    out, page, summary = _report(sweep, capsys)
    iqm = summary["agents"]["alpha"]["iqm"]
    assert iqm["low"] == iqm["high"]  # the three runs scored the same
    assert "all 3 runs scored the same: no spread, not certainty" in out
    assert "all 3 runs scored the same: no spread, not certainty" in page


def test_tuning_records_and_notes_are_shown_when_present(tmp_path):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    opts = build_parser().parse_args([str(sweep), *FAST, "--candidate", "alpha"])
    data = options.with_random_scores(lambda: compute_report(opts))
    summary = report_files.summary_dict(data)
    summary["agents"]["alpha"]["tuning"] = {"trials": 20, "steps": 50000, "envs": ["a", "b"],
                                            "seeds_per_env": 3}
    summary["agents"]["beta"]["tuning"] = None
    page = html.render(data, summary, {})
    assert "tuned: 20 trials × 50,000 steps × 2 envs × 3 seeds" in page
    assert "not tuned" in page
    untouched = html.render(data, report_files.summary_dict(data), {})
    assert "tuned" not in untouched  # no tuning records: no tuning column
    note = "dqn was tuned, tile_sarsa was not: the comparison favours dqn"
    doc = {"candidate": "alpha", "baselines": [], "envs": ["CartPole-v1"], "comparisons": [],
           "tuning_note": note}
    block = verdict_block(doc, str(sweep))
    assert note in block and 'class="warn"' in block


def test_old_page_without_a_verdict_block_gets_one(tmp_path):
    doc = {"candidate": "alpha", "baselines": ["beta"], "envs": ["CartPole-v1"],
           "comparisons": [], "verdict_rule": "rule", "alpha": 0.05,
           "bootstrap": {"confidence": 0.95, "resamples": 10, "seed": 0}}
    page = "<html><body><h1>x</h1></body></html>"
    spliced = html.splice_comparison(page, doc, "results/x", [], [])
    assert spliced.index(html.VERDICT_START) < spliced.index("<h1>")
    assert spliced.count('data-candidate="alpha"') == 2

