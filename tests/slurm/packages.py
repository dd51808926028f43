"""Installing Debian's Slurm packages for the throwaway cluster.

Why here and not in a setup script: CI and every developer machine start fresh, so the
test must bring in what it needs itself; installing is skipped when all programs exist.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

# Debian package -> one program it provides (checked to decide whether to install).
CORE_PACKAGES = {
    "slurmctld": "slurmctld",
    "slurmd": "slurmd",
    "slurm-client": "sbatch",
    "munge": "munged",
}
ACCOUNTING_PACKAGES = {"slurmdbd": "slurmdbd", "mariadb-server": "mariadbd"}

_SEARCH_PATH = os.pathsep.join(
    [os.environ.get("PATH", ""), "/usr/local/sbin", "/usr/sbin", "/sbin", "/usr/bin", "/bin"]
)
# Debian's policy hook: exit 101 means "do not start services from package scripts".
_POLICY_RC = Path("/usr/sbin/policy-rc.d")
_apt_updated = False


class SlurmInstallError(RuntimeError):
    """apt-get could not install the packages although apt and root were there."""


def program(name: str) -> str | None:
    """Full path of an installed program, also looking in the sbin folders."""
    return shutil.which(name, path=_SEARCH_PATH)


def missing_packages(accounting: bool) -> list[str]:
    """Debian packages whose program is not installed yet."""
    wanted = dict(CORE_PACKAGES)
    if accounting:
        wanted.update(ACCOUNTING_PACKAGES)
    return [package for package, prog in wanted.items() if program(prog) is None]


def available(accounting: bool = True) -> tuple[bool, str]:
    """Whether a local cluster can be installed and started here, and why not if not."""
    if not sys.platform.startswith("linux"):
        return False, f"local SLURM needs Linux, this is {sys.platform}"
    if os.geteuid() != 0:
        return False, "local SLURM runs its daemons as root; this test is not running as root"
    missing = missing_packages(accounting)
    if not missing:
        return True, "Slurm packages already installed"
    if program("apt-get") is None:
        return False, f"no apt-get to install {' '.join(missing)}"
    return True, f"will install with apt-get: {' '.join(missing)}"


def _apt(args: list[str], timeout_s: float) -> None:
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    argv = ["apt-get", "-q", "-o", "DPkg::Lock::Timeout=120", *args]
    try:
        result = subprocess.run(
            argv,
            env=env,
            capture_output=True,
            text=True,
            timeout=timeout_s,
            stdin=subprocess.DEVNULL,
        )
    except subprocess.TimeoutExpired as err:
        raise SlurmInstallError(f"{' '.join(argv)} took over {timeout_s:.0f} s") from err
    if result.returncode != 0:
        output = "\n".join((result.stdout + result.stderr).splitlines()[-20:])
        raise SlurmInstallError(f"{' '.join(argv)} exited {result.returncode}:\n{output}")


def install(accounting: bool = True, timeout_s: float = 900.0) -> list[str]:
    """Install missing Slurm (and accounting) packages; return what was installed.

    Package scripts are kept from starting system services (the cluster runs its own
    daemons on its own files), by a temporary policy-rc.d where the machine has none.
    """
    global _apt_updated
    missing = missing_packages(accounting)
    if not missing:
        return []
    ok, reason = available(accounting)
    if not ok:
        raise SlurmInstallError(reason)
    added_policy = not _POLICY_RC.exists()
    if added_policy:
        _POLICY_RC.write_text("#!/bin/sh\n# temporary, from tests/slurm/packages.py\nexit 101\n")
        _POLICY_RC.chmod(0o755)
    try:
        if not _apt_updated:
            _apt(["update"], timeout_s)
            _apt_updated = True
        _apt(["install", "-y", "--no-install-recommends", *missing], timeout_s)
    finally:
        if added_policy:
            _POLICY_RC.unlink(missing_ok=True)
    still_missing = missing_packages(accounting)
    if still_missing:
        raise SlurmInstallError(f"installed, yet programs still missing for: {still_missing}")
    return missing
