"""Seeded generators and their states in checkpoint-friendly form."""

from __future__ import annotations

from typing import Any

import numpy as np
import torch


def make_generators(seed: int) -> tuple[np.random.Generator, torch.Generator]:
    """A numpy and a torch generator, both derived from ``seed`` and independent."""
    ss = np.random.SeedSequence(seed)
    np_seed, torch_seed = ss.spawn(2)
    rng = np.random.default_rng(np_seed)
    gen = torch.Generator().manual_seed(int(torch_seed.generate_state(1, np.uint64)[0] >> 1))
    return rng, gen


def generator_states(rng: np.random.Generator, gen: torch.Generator) -> dict[str, Any]:
    return {"numpy": rng.bit_generator.state, "torch": gen.get_state()}


def load_generator_states(state: dict[str, Any], rng: np.random.Generator,
                          gen: torch.Generator) -> None:
    rng.bit_generator.state = state["numpy"]
    gen.set_state(state["torch"])
