#!/usr/bin/env bash
# Instruction counts of whole solves under valgrind's callgrind: they repeat exactly on a
# loaded machine, where wall times do not. Prints one line per case: the problem, intervals,
# total instructions (the callgrind total, "Ir"), and the status and iterations of the solve.
#
#   scripts/instructions.sh [BINARY]        (default: target/release/costate, built if missing)
#
# Compare two builds side by side by running it once with each binary. Needs valgrind.
set -euo pipefail
cd "$(dirname "$0")/.."
bin="${1:-target/release/costate}"
if [[ ! -x "$bin" ]]; then
  cargo build --release -p costate-cli
fi
command -v valgrind >/dev/null || { echo "valgrind is needed (apt-get install valgrind)" >&2; exit 1; }
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
cases=(
  "examples/crane_transfer.costate 100"
  "tests/fixtures/references/goddard_rocket.costate 200"
  "tests/fixtures/references/particle_steering.costate 100"
  "tests/fixtures/references/hang_glider.costate 100"
)
printf '%-52s %9s %16s  %s\n' problem intervals instructions outcome
for case in "${cases[@]}"; do
  read -r file intervals <<<"$case"
  out="$work/out"
  mkdir -p "$out"
  valgrind --tool=callgrind --callgrind-out-file="$work/cg.out" \
    "$bin" solve "$file" --intervals "$intervals" --format json --quiet --out "$out" \
    >/dev/null 2>"$work/valgrind.log" || true
  total="$(grep -E '^(summary|totals):' "$work/cg.out" | head -1 | awk '{print $2}')"
  outcome="$(python3 - "$out" <<'PY'
import glob, json, sys
files = glob.glob(sys.argv[1] + "/*.solution.json")
if not files:
    print("no solution written")
else:
    d = json.load(open(files[0]))
    print(f"{d.get('status')} in {d.get('iterations')} iterations")
PY
)"
  printf '%-52s %9s %16s  %s\n' "$file" "$intervals" "$total" "$outcome"
  rm -rf "$out" "$work/cg.out"
done
