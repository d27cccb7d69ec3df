#!/usr/bin/env bash
# Generate one campaign, run latchtime on it and score the records.
#   run_check.sh CAMPAIGN [SEED] [score.py options such as --json or --detail]
# Env: LATCHTIME_BIN (default target/release/latchtime),
#      PYTHON (default python3), INDEP_DATA (default indep-data),
#      LATCHTIME_JOBS (default 2), COUNT (trials; default the campaign's own count).
set -euo pipefail
CAMPAIGN=${1:?usage: run_check.sh CAMPAIGN [SEED] [score options]}
shift
SEED=1
if [[ $# -gt 0 && $1 =~ ^[0-9]+$ ]]; then SEED=$1; shift; fi
HERE=$(cd "$(dirname "$0")" && pwd)
PY=${PYTHON:-python3}
BIN=${LATCHTIME_BIN:-target/release/latchtime}
DATA=${INDEP_DATA:-indep-data}/$CAMPAIGN
JOBS=${LATCHTIME_JOBS:-2}

# start clean, but only remove a folder this script made before (it holds manifest.csv and truths)
if [[ -d $DATA ]]; then
  if [[ -f $DATA/manifest.csv ]]; then rm -rf "$DATA"; else echo "refusing to clear $DATA (not a generated campaign)" >&2; exit 2; fi
fi
COUNT_ARG=()
if [[ -n ${COUNT:-} ]]; then COUNT_ARG=(--count "$COUNT"); fi
"$PY" "$HERE/make_trials.py" --campaign "$CAMPAIGN" --out "$DATA" --seed "$SEED" "${COUNT_ARG[@]}"
"$BIN" batch "$DATA/manifest.csv" --out "$DATA/results" --rig "$DATA/rig.json" --force --quiet --jobs "$JOBS"
"$PY" "$HERE/score.py" "$DATA/results" "$DATA" "$@"
