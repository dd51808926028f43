"""The verdict block at the top of report.html and the Comparison section further down.

Both sit between markers so ``seedsweep compare`` can replace them in an existing page
without rebuilding it. Verdicts differ by a symbol, a word and a border style, not by colour
alone.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from seedsweep.runner.present import text
from seedsweep.runner.present.html_parts import Raw, esc, interval_cell, swatch, table

VERDICT_START = "<!-- seedsweep:verdict:start -->"
VERDICT_END = "<!-- seedsweep:verdict:end -->"
COMPARISON_START = "<!-- seedsweep:comparison:start -->"
COMPARISON_END = "<!-- seedsweep:comparison:end -->"
VERDICT_CLASS = {"better": "v-better", "worse": "v-worse",
                 "insufficient evidence": "v-insufficient", "cannot decide": "v-cannot"}


def verdict_block(doc: Mapping[str, Any] | None, folder: str, note: str = "",
                  ranking: list[tuple[str, Any]] | None = None,
                  colours: Mapping[str, str] | None = None) -> str:
    """The summary block: candidate vs each baseline with the verdict and its evidence; when
    no candidate was named, the IQM ranking and how to ask for a verdict."""
    colours = colours or {}
    named = f' data-candidate="{esc(doc["candidate"])}"' if doc is not None else ""
    parts = [VERDICT_START, f'<section class="verdict" id="verdict"{named}>']
    if doc is None:
        parts.append("<h2>No verdict yet: no candidate was named</h2>")
        if ranking:
            items = "; ".join(f"{swatch(a, colours)} {interval_cell(iv)}" for a, iv in ranking)
            parts.append(f"<p>Agents by IQM of normalised scores: {items}.</p>")
        parts.append(_how_to_compare(folder))
    else:
        parts.append(_verdicts(doc, folder, colours))
    if note:
        parts.append(f'<p class="warn">{esc(note)}</p>')
    parts += ["</section>", VERDICT_END]
    return "\n".join(parts)


def _how_to_compare(folder: str) -> str:
    return ('<p class="hint">To compare your agent with the others, name it as the candidate: '
            f"<code>seedsweep report {esc(folder)} --candidate NAME</code> (or "
            f"<code>seedsweep compare {esc(folder)} --candidate NAME</code>).</p>")


def _verdicts(doc: Mapping[str, Any], folder: str, colours: Mapping[str, str]) -> str:
    cand = doc["candidate"]
    comps = doc["comparisons"]
    out = [f"<h2>Verdict: {swatch(cand, colours)} against {len(comps)} "
           f"baseline{'s' if len(comps) != 1 else ''}</h2>"]
    if doc.get("tuning_note"):
        out.append(f'<p class="warn">{esc(doc["tuning_note"])}</p>')
    out.append("<ol>")
    for c in comps:
        word = c["verdict"]
        sign = text.VERDICT_SIGNS.get(word, "")
        diff, p = c["iqm_difference"], c["probability_of_improvement"]
        zero = (f'<p class="flag">IQM difference: '
                f'{esc(text.no_spread_note(_runs(c), len(doc["envs"])))}</p>'
                if diff.get("zero_width") else "")
        if text.zero_width(p):
            zero += f'<p class="flag">P: {esc(text.ZERO_WIDTH_NOTE)}</p>'
        out.append(
            f'<li class="v {VERDICT_CLASS.get(word, "v-insufficient")}">'
            f'<p class="vline"><span class="badge">{esc(sign)} {esc(word)}</span> '
            f"{esc(cand)} vs {swatch(c['baseline'], colours)}: IQM difference "
            f"{interval_cell(_signed(diff), signed=True)}, "
            f"P({esc(cand)} &gt; {esc(c['baseline'])}) "
            f"{interval_cell(p)}</p>{zero}"
            f'<p class="why">{esc(c["reason"])}</p>'
            f'<p class="evidence">Evidence: {esc(c["evidence"])}</p></li>')
    out.append("</ol>")
    undecided = [c["baseline"] for c in comps if c["verdict"] not in ("better", "worse")]
    if undecided:
        need = max(int(c.get("decisive_seeds_per_env") or 0) for c in comps)
        have = min(_min_seeds(c) for c in comps)
        first = text.shell_word(undecided[0])
        more = (f" (likewise for {', '.join(undecided[1:])})" if len(undecided) > 1 else "")
        floor = (f" On {len(doc['envs'])} env(s) no verdict is possible below {need} seeds per "
                 f"agent per env; these runs have {have}." if need > have else "")
        out.append(
            f"<p><strong>Next:</strong> how many seeds a decisive answer needs: "
            f"<code>seedsweep plan-seeds {esc(folder)} --candidate "
            f"{esc(text.shell_word(cand))} --baseline {esc(first)} --difference D</code>"
            f"{esc(more)}, with D the smallest difference in score that matters to you."
            f"{esc(floor)}</p>")
    return "\n".join(out)


def _signed(diff: Mapping[str, Any]) -> dict[str, float]:
    return {"point": diff["point"], "low": diff["low"], "high": diff["high"]}


def _min_seeds(c: Mapping[str, Any]) -> int:
    cells = c.get("per_env", {}).values()
    return min((min(cell["raw_iqm"]["candidate"]["n_seeds"], cell["raw_iqm"]["baseline"]["n_seeds"])
                for cell in cells), default=0)


def _runs(c: Mapping[str, Any]) -> int:
    cells = c.get("per_env", {}).values()
    return sum(cell["raw_iqm"]["candidate"]["n_seeds"] + cell["raw_iqm"]["baseline"]["n_seeds"]
               for cell in cells)


def comparison_section(doc: Mapping[str, Any] | None, folder: str, note: str = "",
                       colours: Mapping[str, str] | None = None) -> str:
    """The Comparison section between its markers; without a candidate it says how to get
    one."""
    colours = colours or {}
    named = f' data-candidate="{esc(doc["candidate"])}"' if doc is not None else ""
    parts = [COMPARISON_START, f'<section id="comparison"{named}><h2>Comparison</h2>']
    if note:
        parts.append(f'<p class="warn">{esc(note)}</p>')
    if doc is None:
        parts.append(_how_to_compare(folder))
    else:
        parts.append(_comparison_body(doc, colours))
    parts += ["</section>", COMPARISON_END]
    return "\n".join(parts)


def _comparison_body(doc: Mapping[str, Any], colours: Mapping[str, str]) -> str:
    b = doc["bootstrap"]
    cand = doc["candidate"]
    conf = text.ci_label(b["confidence"])
    rows = [[swatch(c["baseline"], colours), Raw(f"{esc(text.VERDICT_SIGNS.get(c['verdict'], ''))}"
                                                 f" {esc(c['verdict'])}"),
             f"{c['p_adjusted']:.3g}", interval_cell(_signed(c["iqm_difference"]), signed=True),
             interval_cell(c["probability_of_improvement"])] for c in doc["comparisons"]]
    env_rows = []
    for c in doc["comparisons"]:
        for env, cell in c["per_env"].items():
            x, y = cell["raw_iqm"]["candidate"], cell["raw_iqm"]["baseline"]
            env_rows.append([env, swatch(c["baseline"], colours),
                             interval_cell(x, raw=True, n=x["n_seeds"]),
                             interval_cell(y, raw=True, n=y["n_seeds"]),
                             interval_cell(cell["probability_of_improvement"])])
    return "\n".join([
        f"<p>Candidate {swatch(cand, colours)} against {len(doc['comparisons'])} baseline(s) "
        f"on {len(doc['envs'])} env(s), at alpha {esc(doc.get('alpha', ''))}. IQM "
        "difference: IQM of normalised scores pooled over envs, candidate minus baseline, with "
        f"its interval at level 1 - alpha; P: {conf}, {esc(b['resamples'])} stratified "
        f"bootstrap resamples, seed {esc(b['seed'])}. From <code>report/compare.json</code>."
        "</p>",
        f"<p>Verdict rule: {esc(doc['verdict_rule'])}</p>",
        table(["baseline", "verdict", "p (adjusted)", "IQM difference",
               f"P({cand} > baseline), {conf}"], rows),
        f"<h3>Per env: IQM of raw scores over seeds, {esc(conf)} (seeds)</h3>",
        table(["env", "baseline", cand, "baseline's score", f"P({cand} > baseline)"],
              env_rows),
    ])


def splice(page: str, start: str, end: str, section: str, after: str = "<body>") -> str:
    """``page`` with the part between ``start`` and ``end`` replaced by ``section`` (which
    carries its own markers); inserted after ``after`` (or before ``</body>``) in a page made
    before the part existed."""
    i, j = page.find(start), page.find(end)
    if i != -1 and j > i:
        return page[:i] + section + page[j + len(end):]
    at = page.find(after)
    if at != -1:
        at += len(after)
        return page[:at] + "\n" + section + page[at:]
    at = page.rfind("</body>")
    if at == -1:
        return page + section + "\n"
    return page[:at] + section + "\n" + page[at:]
