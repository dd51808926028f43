"""One colour per agent, the same in every report and figure: derived from the agent's name.

Why a hash and not the position in a list: a colour taken from sort order changes when an
agent is added to or left out of a report, so "DQN is blue" would hold in one report and not
the next. Here each name hashes (SHA-256, stable across processes and machines, unlike
Python's salted ``hash``) to a preferred slot of a fixed palette. Two names that hash to the
same slot in one report would be indistinguishable, so the name with the smaller digest keeps
the slot and the other takes the next free one; an agent's colour therefore changes only in a
report holding another agent that wants the same slot. The random agent is always grey.

The palette is Paul Tol's "muted" qualitative scheme (P. Tol, *Colour Schemes*, SRON
technical note SRON/EPS/TN/09-002, issue 3.2, 2021), chosen to stay distinguishable for the
common forms of colour blindness and on white paper, less its purple, which next to its wine
was hard to tell apart in thin curves (seen in our own reports), and its pale grey for missing
data; grey is kept for the random agent.
"""

from __future__ import annotations

import hashlib
from collections.abc import Collection, Iterable

PALETTE = (  # ordered so that neighbours differ (a clash moves a name to the next slot)
    "#332288",  # indigo
    "#DDCC77",  # sand
    "#44AA99",  # teal
    "#882255",  # wine
    "#88CCEE",  # cyan
    "#999933",  # olive
    "#CC6677",  # rose
    "#117733",  # green
)
RANDOM_GREY = "#8C8C8C"
REFERENCE_INK = "#222222"  # the reference level: near-black, dashed


def is_random(label: str, floor: Collection[str]) -> bool:
    """The random floor: one of ``floor``, the labels of the report's runs of the uniform
    random agent (marked by its class, never guessed from a name)."""
    return label in floor


def _digest(label: str) -> int:
    return int.from_bytes(hashlib.sha256(label.encode("utf-8")).digest()[:8], "big")


def preferred_colour(label: str, floor: Collection[str] = ()) -> str:
    """The colour ``label`` gets when no other agent of the report wants the same one."""
    if is_random(label, floor):
        return RANDOM_GREY
    return PALETTE[_digest(label) % len(PALETTE)]


def agent_colours(labels: Iterable[str], floor: Collection[str] = ()) -> dict[str, str]:
    """label -> colour for the agents of one report. The result does not depend on the order
    of ``labels``; colours repeat only beyond len(PALETTE) agents."""
    names = sorted(set(labels), key=lambda n: (_digest(n), n))
    out: dict[str, str] = {}
    taken: set[int] = set()
    for name in names:
        if is_random(name, floor):
            out[name] = RANDOM_GREY
            continue
        slot = _digest(name) % len(PALETTE)
        if len(taken) < len(PALETTE):
            while slot in taken:
                slot = (slot + 1) % len(PALETTE)
        taken.add(slot)
        out[name] = PALETTE[slot]
    return out
