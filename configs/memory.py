"""Does a setting fit in memory? Estimates are checked before anything is built or written.

A replay capacity of 10**12 or a frame stack of 10**8 observations is refused up front with
one line naming the field and the estimate, instead of hanging while it allocates or dying
of a MemoryError after the run folder exists. The limit is what this machine (or this
job's cgroup, on a cluster node) has available now.
"""

from __future__ import annotations

import os
from pathlib import Path

from seedsweep.configs.checks import ConfigError


def available_bytes() -> int | None:
    """Memory available to this process now: ``MemAvailable`` of /proc/meminfo (else free
    physical pages), lowered to what the process's cgroup v2 limit leaves; None if unknown."""
    found = _meminfo_available()
    if found is None:
        try:
            found = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (ValueError, OSError, AttributeError):
            found = None
    limit = _cgroup_room()
    if limit is not None:
        found = limit if found is None else min(found, limit)
    return found


def _meminfo_available() -> int | None:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024  # the kernel reports kB
    except (OSError, ValueError, IndexError):
        pass
    return None


def _cgroup_room() -> int | None:
    """``memory.max - memory.current`` of this process's cgroup (v2), if it has a limit."""
    try:
        for line in Path("/proc/self/cgroup").read_text().splitlines():
            if line.startswith("0::"):
                folder = Path("/sys/fs/cgroup") / line[3:].strip().lstrip("/")
                limit = (folder / "memory.max").read_text().strip()
                if limit == "max":
                    return None
                used = int((folder / "memory.current").read_text().strip())
                return max(0, int(limit) - used)
    except (OSError, ValueError):
        pass
    return None


def human(n: float) -> str:
    """``1.5 GiB``: bytes in binary units, three significant digits."""
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(n) < 1024 or unit == "PiB":
            return f"{n:.3g} {unit}" if unit != "B" else f"{int(n)} B"
        n /= 1024
    return f"{n:.3g} PiB"


def check_fits(field: str, need: float, what: str, available: int | None = None) -> None:
    """ConfigError naming ``field`` when ``need`` bytes (for ``what``) exceed the memory
    available now; unknown availability lets it pass."""
    have = available_bytes() if available is None else available
    if have is not None and need > have:
        raise ConfigError(field, f"{what} needs about {human(need)} of memory, more than the "
                          f"{human(have)} available on this machine now")
