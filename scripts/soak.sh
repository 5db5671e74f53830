#!/usr/bin/env bash
# Soak test of `wahbad serve`: the simulator library streams a busy bench
# (about 1,500 obs/rate messages per second) over TCP in real time for
# SECONDS (default 600); RSS and counters are sampled and the run fails on
# memory growth, counters that disagree or a missing epoch (criteria in
# daemon/tests/soak.rs).
#
#   scripts/soak.sh [SECONDS]
set -euo pipefail
secs="${1:-600}"
cd "$(dirname "$0")/.."
WAHBAD_SOAK_SECS="$secs" cargo test -p wahbad --test soak -- --nocapture --test-threads 1
