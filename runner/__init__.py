"""seedsweep's runner: config, the training loop, the evaluation protocol, run records.

It knows nothing agent-specific: it talks to agents only through :mod:`seedsweep.agents.base`.
"""
