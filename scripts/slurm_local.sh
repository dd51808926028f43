#!/usr/bin/env bash
# Start a throwaway one-node SLURM (installs Debian's packages if missing; needs root),
# run the given command against it, then stop everything.
#   scripts/slurm_local.sh sinfo
#   scripts/slurm_local.sh .venv/bin/python -m seedsweep.runner.commands.main ...   # a sweep via submitit
#   scripts/slurm_local.sh                                      # stay up until Ctrl-C
set -euo pipefail
cd "$(dirname "$0")/.."
PYTHON="${PYTHON:-.venv/bin/python}"
opts=()
while [[ $# -gt 0 && "$1" == --* ]]; do
    [[ "$1" == "--" ]] && { shift; break; }
    opts+=("$1"); shift
done
exec "$PYTHON" -m tests.slurm "${opts[@]}" -- "$@"
