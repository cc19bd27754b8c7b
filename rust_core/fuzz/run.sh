#!/usr/bin/env bash
# Run each loader fuzz target for a bounded number of executions and record what libFuzzer
# reported in RESULTS.md beside this script. `make fuzz` calls it after writing the seeds:
#
#     CARGO_FUZZ=.tools/bin/cargo-fuzz bash rust_core/fuzz/run.sh 1000000
#
# cargo fuzz passes nightly-only flags to rustc; RUSTC_BOOTSTRAP=1 lets the stable compiler
# take them. `-a` keeps overflow checks and debug assertions on, so an arithmetic overflow
# in the query path is a crash the fuzzer reports, not a silently wrong answer.
set -euo pipefail

runs=${1:?usage: run.sh RUNS_PER_TARGET}
cargo_fuzz=$(realpath "${CARGO_FUZZ:?set CARGO_FUZZ to the cargo-fuzz binary}")
here=$(cd "$(dirname "$0")" && pwd)
crate=$(dirname "$here")
mkdir -p "$here/logs"

# An input that takes longer than this many seconds counts as a hang, and fails the run.
timeout_s=10
started=$(date -u +"%Y-%m-%d %H:%M UTC")
source_state=$(git -C "$crate" rev-parse --short HEAD 2>/dev/null || echo "unknown")
if ! git -C "$crate" diff --quiet HEAD -- src 2>/dev/null; then
    source_state="$source_state plus uncommitted changes in rust_core/src"
fi
load_start=$(cut -d' ' -f1-3 /proc/loadavg)
rows=()
failed=0
for target in load load_rehashed; do
    mkdir -p "$here/corpus/$target"
    log="$here/logs/$target.log"
    echo "fuzzing $target for $runs executions (log: ${log#"$PWD"/})"
    begin=$(date +%s)
    set +e
    (cd "$crate" && RUSTC_BOOTSTRAP=1 "$cargo_fuzz" run -a "$target" \
        "fuzz/corpus/$target" fuzz/corpus/seeds -- \
        -runs="$runs" -timeout="$timeout_s" -print_final_stats=1) >"$log" 2>&1
    status=$?
    set -e
    wall=$(($(date +%s) - begin))
    done_line=$(grep -oE 'Done [0-9]+ runs in [0-9]+ second' "$log" | tail -1 || true)
    if [[ $status -eq 0 && -n $done_line ]]; then
        executions=$(awk '{print $2}' <<<"$done_line")
        seconds=$(awk '{print $5}' <<<"$done_line")
        outcome="no crash, no hang, no failed check"
    else
        executions=$(grep -oE '^#[0-9]+' "$log" | tail -1 | tr -d '#' || true)
        seconds="-"
        outcome="FAILED (exit $status): see rust_core/fuzz/artifacts/$target/ and the log"
        failed=1
    fi
    echo "  $target: ${executions:-0} executions, $seconds s fuzzing, $wall s wall; $outcome"
    rows+=("| \`$target\` | ${executions:-0} | $seconds | $wall | $outcome |")
done

cat >"$here/RESULTS.md" <<EOF
# Loader fuzzing: the last run

Written by \`make fuzz\` (\`rust_core/fuzz/run.sh\`); see "Fuzzing the loader" in
DEVELOPERS.md for what each target does.

- Run started: $started
- Source: commit $source_state
- $("$cargo_fuzz" --version), $(rustc --version)
- Executions asked per target: $runs (\`-runs=$runs -timeout=$timeout_s\`, one process,
  AddressSanitizer, overflow checks and debug assertions on)
- Load average at start: $load_start; at end: $(cut -d' ' -f1-3 /proc/loadavg) (a shared
  2-core machine)

| target | executions (libFuzzer's "Done N runs") | fuzzing s (libFuzzer) | wall s (with build) | outcome |
| --- | ---: | ---: | ---: | --- |
$(printf '%s\n' "${rows[@]}")
EOF
echo "wrote ${here#"$PWD"/}/RESULTS.md"
exit $failed
