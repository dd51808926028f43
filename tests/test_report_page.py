"""report.html in a real browser: Debian's headless Chromium, driven by Selenium through
Debian's chromedriver, at 800 and 1400 CSS pixels wide.

Chromium and chromium-driver are installed with apt-get when missing (tests/browser/);
the test skips only where they cannot be had (not Linux, not root, no apt-get). The check
values come from the browser itself: CSSOM View (``scrollWidth`` against ``innerWidth``,
``getBoundingClientRect``), the HTML standard's image state (``complete``, ``naturalWidth``,
``decode()``) and chromedriver's browser log (console errors are logged at level SEVERE).
The sweeps are invented (they test the page, not the statistics).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from seedsweep.runner.commands.report import main as report_main

try:  # pytest puts the rootdir-less tests/ folder itself on sys.path
    from browser import packages
    from browser.page import chromium
    from test_report import ENVS, write_run
except ModuleNotFoundError:  # tests/ imported as a package from the repo root
    from tests.browser import packages
    from tests.browser.page import chromium
    from tests.test_report import ENVS, write_run

pytestmark = [pytest.mark.browser, pytest.mark.timeout(1200)]

WIDTHS = (800, 1400)
MORE_ENVS = {  # gymnasium specs with a reward_threshold, so the report has a reference
    "acrobot": {"name": "acrobot", "id": "Acrobot-v1", "kwargs": {}, "max_episode_steps": None,
                "reference": None, "wrappers": []},
    "mountaincar": {"name": "mountaincar", "id": "MountainCar-v0", "kwargs": {},
                    "max_episode_steps": None, "reference": None, "wrappers": []},
}
SCALE = {"frozenlake": 1.0, "cartpole": 400.0, "acrobot": -400.0, "mountaincar": -150.0}


def _sweep(root: Path, name: str, agents: dict[str, float], envs: list[str],
           seeds: int) -> Path:
    sweep = root / "results" / name
    for env in envs:
        cfg = ENVS.get(env) or MORE_ENVS[env]
        for seed in range(seeds):
            for agent, level in {**agents, "random": 0.02}.items():
                write_run(sweep, agent, env, seed, level * SCALE[env], env_cfg=cfg)
    return sweep


@pytest.fixture(scope="module")
def chromium_ready() -> None:
    ok, reason = packages.available()
    if not ok:
        pytest.skip(reason)
    packages.install()


@pytest.fixture(scope="module")
def pages(tmp_path_factory, chromium_ready) -> dict[str, Path]:
    """Three report pages: the demo's scale with a candidate (verdict block with verdicts),
    the same sweep without a candidate (the block says how to get one), and a wider sweep
    (6 agents with long names, 4 envs) to stress the 800 px layout."""
    root = tmp_path_factory.mktemp("page")
    demo = _sweep(root, "demo", {"mine": 0.8, "dqn": 0.6, "reinforce": 0.3,
                                 "actor_critic": 0.5}, ["cartpole", "frozenlake"], 3)
    plain = _sweep(root, "plain", {"mine": 0.8, "dqn": 0.6}, ["cartpole", "frozenlake"], 3)
    wide_agents = {f"agent_with_a_long_name_{k}": 0.15 * (k + 1) for k in range(6)}
    wide = _sweep(root, "wide", wide_agents, ["cartpole", "frozenlake", "acrobot",
                                              "mountaincar"], 3)
    fast = ["--resamples", "300", "--quiet"]
    assert report_main([str(demo), *fast, "--candidate", "mine"]) == 0
    assert report_main([str(plain), *fast]) == 0
    assert report_main([str(wide), *fast]) == 0
    return {"demo": demo, "plain": plain, "wide": wide}


PAGE_FACTS = """
const imgs = Array.from(document.images);
const done = arguments[arguments.length - 1];
Promise.allSettled(imgs.map(i => i.decode())).then(results => {
  const verdict = document.getElementById('verdict');
  const firstFigure = document.querySelector('figure');
  done({
    scrollWidth: document.documentElement.scrollWidth,
    innerWidth: window.innerWidth,
    images: imgs.map((img, k) => ({decoded: results[k].status === 'fulfilled',
                                   complete: img.complete, w: img.naturalWidth,
                                   h: img.naturalHeight,
                                   right: img.getBoundingClientRect().right})),
    verdictTop: verdict ? verdict.getBoundingClientRect().top : null,
    verdictBeforeFigure: verdict && firstFigure ?
      !!(verdict.compareDocumentPosition(firstFigure) & Node.DOCUMENT_POSITION_FOLLOWING) : null,
    figureTop: firstFigure ? firstFigure.getBoundingClientRect().top : null,
    badges: Array.from(document.querySelectorAll('#verdict .badge')).map(b => b.textContent),
    verdictText: verdict ? verdict.textContent : '',
    scrollingTables: Array.from(document.querySelectorAll('.tw'))
      .filter(t => t.scrollWidth > t.clientWidth).length,
  });
});
"""


def _facts(driver, page: Path) -> tuple[dict, list[dict]]:
    driver.get(page.as_uri())
    facts = driver.execute_async_script(PAGE_FACTS)
    return facts, driver.get_log("browser")


@pytest.mark.parametrize("width", WIDTHS)
def test_report_page_in_chromium(pages, width):
    with chromium(width) as driver:
        for name, sweep in pages.items():
            page = sweep / "report" / "report.html"
            facts, log = _facts(driver, page)
            where = f"{name} at {width} px"
            assert facts["innerWidth"] == width, where
            # CSSOM View: content wider than the viewport makes scrollWidth exceed innerWidth
            assert facts["scrollWidth"] <= facts["innerWidth"], where
            n_figures = len(list((sweep / "report" / "figures").glob("*.png")))
            assert n_figures == 5 and len(facts["images"]) == n_figures, where
            for img in facts["images"]:  # HTML: a decoded image has its natural size
                assert img["decoded"] and img["complete"], where
                assert img["w"] > 0 and img["h"] > 0, where
                assert img["right"] <= width, where
            assert facts["verdictBeforeFigure"] is True, where
            assert facts["verdictTop"] < facts["figureTop"], where
            severe = [e for e in log if e.get("level") == "SEVERE"]
            assert severe == [], f"{where}: console errors {severe}"
            if name == "demo":  # each verdict reads as a word, not as a colour only
                assert len(facts["badges"]) == 3, where
                words = ("better", "worse", "insufficient evidence", "cannot decide")
                assert all(any(w in b.lower() for w in words) for b in facts["badges"]), where
            if name == "plain":
                assert "--candidate NAME" in facts["verdictText"], where
            if name != "wide":  # at the demo's scale no table needs its own scroll bar
                assert facts["scrollingTables"] == 0, where
