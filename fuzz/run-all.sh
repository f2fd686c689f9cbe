#!/usr/bin/env bash
# Run every fuzz target, one after another, for SECONDS each (default 600).
#
#   fuzz/run-all.sh [SECONDS] [TARGET...]
#
# Needs a nightly toolchain and cargo-fuzz (`cargo install cargo-fuzz`). Not part of CI.
# Builds with debug assertions (so integer overflow panics). New corpus entries go to
# fuzz/work/corpus/<target>/ (not committed); the committed seeds in fuzz/corpus/<target>/ are
# only read. Crashes land in fuzz/artifacts/<target>/; reproduce one with
#   cargo +nightly fuzz run -a -s none <target> fuzz/artifacts/<target>/<file>
# Each run's log is fuzz/work/<target>.log; the last lines give the executions.
# The library forbids unsafe code, so by default no sanitizer is used (about twice the
# executions per second); FUZZ_SANITIZER=address runs with AddressSanitizer.
set -euo pipefail
cd "$(dirname "$0")"

seconds="${1:-600}"
shift || true
targets=("$@")
if [ ${#targets[@]} -eq 0 ]; then
    targets=(split_records tail_dir row_parser site_config calc_case)
fi
flags=(-a -s "${FUZZ_SANITIZER:-none}")

status=0
for t in "${targets[@]}"; do
    mkdir -p "work/corpus/$t" "corpus/$t"
    echo "== $t: ${seconds}s"
    # `fuzz run` builds the target first. -timeout: one input taking over 10 s is a finding;
    # -rss_limit_mb: so is over 2 GiB.
    if ! cargo +nightly fuzz run "${flags[@]}" "$t" "work/corpus/$t" "corpus/$t" -- \
        -max_total_time="$seconds" -timeout=10 -rss_limit_mb=2048 -print_final_stats=1 \
        >"work/$t.log" 2>&1; then
        echo "   FAILED: see fuzz/work/$t.log and fuzz/artifacts/$t/"
        status=1
    fi
    grep -E '^stat::number_of_executed_units|^Done [0-9]+ runs' "work/$t.log" | sed 's/^/   /' || true
done
exit $status
