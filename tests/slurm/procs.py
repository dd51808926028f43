"""Process, port and waiting helpers for the throwaway SLURM cluster.

Why a module of its own: every daemon of the test cluster must be found and ended by its
own pid (never by name), every wait must be bounded in time, and a cluster left behind by a
killed test run must be recognisable as ours before anything of it is touched.
"""

from __future__ import annotations

import ctypes
import os
import signal
import socket
import subprocess
import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

# Every process of one cluster carries MARKER_ENV=<its root folder> in its environment, which
# job processes inherit too (sbatch exports the submitter's environment). That is how
# leftovers are told apart from anything else running on the machine.
MARKER_ENV = "SEEDSWEEP_LOCAL_SLURM"

_PR_SET_PDEATHSIG = 1  # from <linux/prctl.h>
_LIBC = ctypes.CDLL(None, use_errno=True) if os.name == "posix" else None


def _die_with_parent() -> None:
    """Runs in the forked child: SIGTERM it when the starting Python process dies.

    Why: a test run killed with SIGKILL never reaches ``__exit__``; this way its daemons
    still go away instead of holding ports 6817/6818 for the next run.
    """
    if _LIBC is not None:
        _LIBC.prctl(_PR_SET_PDEATHSIG, signal.SIGTERM, 0, 0, 0)


def start_daemon(
    argv: Sequence[str], log_path: Path, env: Mapping[str, str], cwd: Path
) -> subprocess.Popen[bytes]:
    """Start one daemon in the foreground (as our child), output appended to ``log_path``."""
    with open(log_path, "ab") as log:
        return subprocess.Popen(
            list(argv),
            stdin=subprocess.DEVNULL,
            stdout=log,
            stderr=subprocess.STDOUT,
            env=dict(env),
            cwd=cwd,
            start_new_session=True,  # a Ctrl-C in the terminal reaches only the test process
            preexec_fn=_die_with_parent,
        )


def pid_alive(pid: int) -> bool:
    """True while ``pid`` exists and is not a zombie."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[-1].split()[0] != "Z"


def carries_marker(pid: int, root: Path) -> bool:
    """True if process ``pid`` belongs to the cluster rooted at ``root``."""
    try:
        environ = Path(f"/proc/{pid}/environ").read_bytes()
    except OSError:
        return False
    return f"{MARKER_ENV}={root}".encode() in environ.split(b"\0")


def marked_pids(root: Path) -> list[int]:
    """All live processes that belong to the cluster rooted at ``root``."""
    own = os.getpid()
    candidates = (int(entry.name) for entry in Path("/proc").iterdir() if entry.name.isdigit())
    return sorted(
        pid for pid in candidates if pid != own and carries_marker(pid, root) and pid_alive(pid)
    )


def end_pids(pids: Sequence[int], timeout_s: float) -> None:
    """SIGTERM all ``pids`` at once, wait up to ``timeout_s``, then SIGKILL what is left."""
    for sig, wait_s in ((signal.SIGTERM, timeout_s), (signal.SIGKILL, 5.0)):
        alive = [pid for pid in pids if pid_alive(pid)]
        for pid in alive:
            try:
                os.kill(pid, sig)
            except ProcessLookupError:
                pass
        deadline = time.monotonic() + wait_s
        while alive and time.monotonic() < deadline:
            time.sleep(0.05)
            alive = [pid for pid in alive if pid_alive(pid)]
        if not alive:
            return


def end_pid(pid: int, timeout_s: float) -> None:
    """End one process by pid: SIGTERM, then SIGKILL after ``timeout_s``."""
    end_pids([pid], timeout_s)


def end_child(proc: subprocess.Popen[bytes], timeout_s: float) -> None:
    """End a daemon we started and reap it, so it leaves no zombie."""
    if proc.poll() is None:
        end_pid(proc.pid, timeout_s)
    try:
        proc.wait(timeout=5.0)
    except subprocess.TimeoutExpired:
        pass


def read_pid_file(path: Path) -> int | None:
    """The pid in ``path``, or None when the file is missing or holds no number."""
    try:
        text = path.read_text().strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None


def port_free(port: int) -> bool:
    """True if nothing listens on ``port`` (any address), judged by a test bind."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            sock.bind(("0.0.0.0", port))
        except OSError:
            return False
    return True


def unused_port() -> int:
    """A TCP port the kernel reports unused right now (for the private MariaDB)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def wait_until(
    condition: Callable[[], bool],
    timeout_s: float,
    what: str,
    still_starting: Callable[[], str | None] | None = None,
    poll_s: float = 0.05,
) -> float:
    """Poll ``condition`` until true; return seconds waited, raise TimeoutError past timeout.

    ``still_starting`` may return a reason to give up at once (e.g. the daemon exited).
    """
    start = time.monotonic()
    while True:
        if condition():
            return time.monotonic() - start
        if still_starting is not None:
            reason = still_starting()
            if reason is not None:
                raise RuntimeError(f"{what}: {reason}")
        if time.monotonic() - start > timeout_s:
            raise TimeoutError(f"{what}: not reached within {timeout_s:.0f} s")
        time.sleep(poll_s)


def run(
    argv: Sequence[str], env: Mapping[str, str], timeout_s: float = 30.0, check: bool = True
) -> subprocess.CompletedProcess[str]:
    """Run a short client command with a time limit; on failure raise with its output."""
    result = subprocess.run(
        list(argv),
        env=dict(env),
        capture_output=True,
        text=True,
        timeout=timeout_s,
        stdin=subprocess.DEVNULL,
    )
    if check and result.returncode != 0:
        raise RuntimeError(
            f"{' '.join(argv)} exited {result.returncode}: {result.stdout}{result.stderr}".strip()
        )
    return result


def tail(path: Path, lines: int = 15) -> str:
    """Last lines of a log file, for error messages."""
    try:
        return "\n".join(path.read_text(errors="replace").splitlines()[-lines:])
    except OSError:
        return f"(no log at {path})"
