#!/usr/bin/env bash
# Runs every fuzz target for SECONDS (default 60) each, seeded with the examples and test
# fixtures; exits non-zero on the first crash, leaving its input under fuzz/artifacts/.
#
#   bash fuzz/run.sh [SECONDS]
#
# Needs cargo-fuzz (`cargo install cargo-fuzz --locked`). libFuzzer's instrumentation takes
# options of a nightly compiler; RUSTC_BOOTSTRAP lets the stable toolchain accept them.
set -euo pipefail
cd "$(dirname "$0")/.."
seconds="${1:-60}"
export RUSTC_BOOTSTRAP=1
targets=(parse check fmt_round_trip lower edit_apply)
for t in "${targets[@]}"; do
  mkdir -p "fuzz/corpus/$t"
  find examples crates/*/tests/fixtures tests/fixtures -name '*.costate' -print0 2>/dev/null |
    while IFS= read -r -d '' f; do
      cp "$f" "fuzz/corpus/$t/seed-$(echo "$f" | tr '/' '_')"
    done
done
cargo fuzz build --release
for t in "${targets[@]}"; do
  echo "== fuzz $t for ${seconds} s"
  # Inputs of up to 64 KiB; each one is given 10 s (a hang is a finding too).
  cargo fuzz run --release "$t" "fuzz/corpus/$t" -- \
    -max_total_time="$seconds" -max_len=65536 -timeout=10 -rss_limit_mb=4096 -print_final_stats=1
done
