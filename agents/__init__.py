"""Agents: one file per algorithm behind the contract in :mod:`agents.base`."""

from agents.base import Agent, ConfigError, Step

__all__ = ["Agent", "ConfigError", "Step"]
