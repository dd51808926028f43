"""Manual use: start a local cluster, run a command against it, stop it again.

    python -m tests.slurm [--no-accounting] [--keep-files] [-- COMMAND ...]

Without a command it waits until Ctrl-C, printing the SLURM_CONF to export in another shell.
"""

from __future__ import annotations

import argparse
import signal
import subprocess
import sys
import threading

from .cluster import LocalSlurm, available


def parse_args(argv: list[str]) -> argparse.Namespace:
    summary = (__doc__ or "").split("\n")[0]
    parser = argparse.ArgumentParser(prog="python -m tests.slurm", description=summary)
    parser.add_argument(
        "--no-accounting",
        action="store_true",
        help="skip slurmdbd + MariaDB (sacct then fails; submitit cannot see "
        "jobs that die without a result)",
    )
    parser.add_argument(
        "--keep-files",
        action="store_true",
        help="keep the cluster folder (config, logs, state) after stopping",
    )
    parser.add_argument("command", nargs="*", help="command to run while the cluster is up")
    return parser.parse_args(argv)


def main(argv: list[str] | None = None) -> int:
    args = parse_args(sys.argv[1:] if argv is None else argv)
    ok, reason = available(accounting=not args.no_accounting)
    if not ok:
        print(f"local SLURM unavailable: {reason}", file=sys.stderr)
        return 2
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    with LocalSlurm(accounting=not args.no_accounting, keep_files=args.keep_files) as cluster:
        layout = cluster.layout
        assert layout is not None
        print(
            f"local SLURM up in {cluster.timings.get('start_s', 0.0):.1f} s; "
            f"export SLURM_CONF={layout.slurm_conf}",
            file=sys.stderr,
            flush=True,
        )
        if args.command:
            return subprocess.run(args.command, env=cluster.env(), check=False).returncode
        try:
            stop.wait()
        except KeyboardInterrupt:
            pass
    return 0


if __name__ == "__main__":
    sys.exit(main())
