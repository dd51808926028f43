"""Agents: one file per algorithm behind the contract in :mod:`seedsweep.agents.base`."""

from seedsweep.agents.base import Agent, ConfigError, Step

__all__ = ["Agent", "ConfigError", "Step"]
