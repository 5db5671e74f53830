#!/usr/bin/env bash
# Runs every cargo-fuzz target of fuzz/ for SECONDS each (default 600), one
# or two at a time, seeding the corpora first. Needs cargo-fuzz
# (`cargo install cargo-fuzz --locked`); the toolchain is stable, so
# RUSTC_BOOTSTRAP=1 lets cargo-fuzz use the nightly-only flags it needs.
#
#   scripts/fuzz.sh [SECONDS] [JOBS] [TARGET...]
#
# The targets are safe Rust, so they build without a sanitizer (`-s none`,
# several times more executions per second); overflow checks and debug
# assertions stay on. A crash leaves its input under fuzz/artifacts/<target>/
# and makes the script exit non-zero. Per-target logs: fuzz/logs/<target>.log.
set -euo pipefail

secs="${1:-600}"
jobs="${2:-1}"
shift $(( $# > 2 ? 2 : $# ))
targets=("$@")
if [ ${#targets[@]} -eq 0 ]; then
  targets=(frame_stream validate log_reader estimator)
fi

cd "$(dirname "$0")/../fuzz"
export RUSTC_BOOTSTRAP=1
if [ ! -d corpus/frame_stream ]; then
  cargo run --quiet --example gen_corpus -- corpus
fi
# Seeds from the committed logs too: their first 16 KiB (the header and the
# first records; -max_len below keeps inputs that short anyway).
mkdir -p corpus/log_reader
for log in ../replay-logs/*.wlog; do
  head -c 16384 "$log" >"corpus/log_reader/committed-$(basename "$log")"
done
cargo fuzz build -s none
mkdir -p logs
status=0
run_one() {
  local target="$1"
  mkdir -p "corpus/$target"
  if cargo fuzz run -s none "$target" "corpus/$target" -- \
      -max_total_time="$secs" -max_len=16384 -timeout=10 -rss_limit_mb=1024 \
      >"logs/$target.log" 2>&1; then
    echo "$target: ok ($(grep -Eo '#[0-9]+' "logs/$target.log" | tail -1 | tr -d '#') executions in ${secs}s)"
  else
    echo "$target: FAILED, see fuzz/logs/$target.log and fuzz/artifacts/$target/"
    return 1
  fi
}
running=0
pids=()
for target in "${targets[@]}"; do
  run_one "$target" &
  pids+=($!)
  running=$((running + 1))
  if [ "$running" -ge "$jobs" ]; then
    wait -n || status=1
    running=$((running - 1))
  fi
done
while [ "$running" -gt 0 ]; do
  wait -n || status=1
  running=$((running - 1))
done
exit "$status"
