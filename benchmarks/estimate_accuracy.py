"""Estimated vs actual wall time of a sweep, before launch and live.

Runs ``seedsweep run --plan NAME`` (with any extra overrides) through the real command line
into a temporary folder, with a fresh estimate cache unless ``--keep-cache`` (so the estimate
comes from calibration runs, as on a new machine), and reads its stderr as it comes:

- the pre-launch estimate ("estimated wall time H:MM:SS") against the time from that line to
  the end of the sweep (the estimate's calibration runs come before it);
- each live status line's ETA against the time actually left then, once the ETA is measured
  (a fifth of the work done) and while it is still the pre-launch estimate.

Examples (the second is classic_discrete cut down to fit a short session; say so when
quoting it)::

    python benchmarks/estimate_accuracy.py --plan demo -- --config-dir examples/configs
    python benchmarks/estimate_accuracy.py --plan classic_discrete steps=10000 'seed=range(2)'
"""

from __future__ import annotations

import argparse
import json
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ESTIMATE = re.compile(r"estimated wall time (\d+):(\d\d):(\d\d)")
ETA = re.compile(r"ETA (\d+):(\d\d):(\d\d)( \(estimate\))?")


def seconds(m: re.Match) -> int:
    return int(m.group(1)) * 3600 + int(m.group(2)) * 60 + int(m.group(3))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--plan", default="demo")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--keep-cache", action="store_true",
                    help="use this machine's estimate cache instead of a fresh one")
    ap.add_argument("overrides", nargs="*")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        env = dict(os.environ)
        if not args.keep_cache:
            env["SEEDSWEEP_CACHE"] = str(Path(tmp) / "cache")
        cmd = [sys.executable, "-m", "seedsweep.runner.commands.main", "run", "--plan", args.plan,
               f"results_dir={tmp}/results", f"workers={args.workers}", "--progress=lines",
               *args.overrides]
        start = time.monotonic()
        estimated = estimated_at = None
        etas: list[tuple[float, int, bool]] = []
        finished = 0
        with subprocess.Popen(cmd, cwd=ROOT, env=env, stderr=subprocess.PIPE, text=True,
                              stdout=subprocess.DEVNULL) as proc:
            assert proc.stderr is not None
            for line in proc.stderr:
                now = time.monotonic()
                if (m := ESTIMATE.search(line)) and estimated is None:
                    estimated, estimated_at = seconds(m), now
                    print(line.rstrip(), flush=True)
                elif " complete: " in line or " failed: " in line:
                    finished += 1
                elif (m := ETA.search(line)) and line.startswith("seedsweep: ") and "ended" in line:
                    etas.append((now, seconds(m), bool(m.group(4))))
        end = time.monotonic()
        docs = [json.loads(f.read_text()) for f in Path(tmp, "results").glob("*/*/run.json")]
    if proc.returncode != 0 or estimated is None or estimated_at is None:
        raise SystemExit(f"the sweep ended with status {proc.returncode}; estimate {estimated}")
    actual = end - estimated_at
    print(f"plan {args.plan} {' '.join(args.overrides)}: {finished} runs on {args.workers} workers"
          f" | whole command {end - start:.0f} s")
    print(f"pre-launch estimate {estimated} s vs actual {actual:.0f} s after it -> "
          f"{estimated / actual:.2f}x ({100 * (estimated - actual) / actual:+.0f}%)")
    train = sum(d.get("loop_s", 0) - d.get("eval_s", 0) for d in docs)
    evals = sum(d.get("eval_s", 0) for d in docs)
    print(f"actual run time: training {train:.0f} s, evaluation {evals:.0f} s (sum over "
          f"{len(docs)} runs of loop_s - eval_s and eval_s)")
    measured = [(t, eta) for t, eta, pre in etas if not pre]
    if measured:
        errs = [100 * (eta - (end - t)) / max(1.0, end - t) for t, eta in measured]
        print(f"live ETA once a fifth was done: {len(measured)} status lines, error "
              f"median {statistics.median(errs):+.0f}%, first {errs[0]:+.0f}%, "
              f"range {min(errs):+.0f}% .. {max(errs):+.0f}%")
        print("  each line: " + ", ".join(f"ETA {eta} s with {end - t:.0f} s left"
                                          for t, eta in measured))
    else:
        print("live ETA: no status line after a fifth of the work (the sweep was short)")


if __name__ == "__main__":
    main()
