"""A throwaway one-node SLURM for integration tests: ``from .cluster import LocalSlurm``."""

from .cluster import LocalSlurm, available, install

__all__ = ["LocalSlurm", "available", "install"]
