#!/usr/bin/env bash
# Builds the harnesses and fuzzes each one for a while:
#   tests/fuzz/run.sh [seconds per harness, default 60] [build dir, default build/fuzz]
# Each harness starts from its committed corpus (tests/fuzz/corpus/<harness>,
# read only, without the regress-* inputs of known findings) and writes what
# it finds under <build dir>/run/: new inputs in corpus-<harness>/, findings
# (crash-*, leak-*, timeout-*, oom-*) in artifacts-<harness>/, the log in
# <harness>.log. Prints the executions per
# harness and in total; exits non-zero when any harness has a finding.
# GF_FUZZ_FORK=1 runs libFuzzer in fork mode and keeps going after a crash, to
# collect more than one finding per harness. GF_FUZZ_HARNESSES="fuzz_blob ..."
# fuzzes only those (ctest's fuzz_<harness>_run tests run one each); the
# outputs of the other harnesses under <build dir>/run/ are left alone.
set -uo pipefail
# Stack traces for UBSan reports; ASan's leak checking stays on.
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-print_stacktrace=1}
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
secs=${1:-60}
out=${2:-$root/build/fuzz}
case "$secs" in ''|*[!0-9]*) echo "usage: run.sh [seconds per harness] [build dir]" >&2; exit 2;; esac
"$here/build.sh" "$out" || { echo "run.sh: the build failed" >&2; exit 1; }
harnesses=${GF_FUZZ_HARNESSES:-fuzz_blob fuzz_options fuzz_weights fuzz_sql}
for h in $harnesses; do
  case "$h" in fuzz_blob|fuzz_options|fuzz_weights|fuzz_sql) ;;
    *) echo "run.sh: unknown harness '$h' in GF_FUZZ_HARNESSES" >&2; exit 2;; esac
done
work=$out/run
total=0
bad=()
for h in $harnesses; do
  rm -rf "$work/corpus-$h" "$work/artifacts-$h" "$work/seeds-$h" "$work/$h.log"
  mkdir -p "$work/corpus-$h" "$work/artifacts-$h" "$work/seeds-$h"
  # Start from the committed corpus without the regress-* inputs: those are
  # known findings (replay.sh checks them) and would stop the run at once.
  find "$here/corpus/$h" -maxdepth 1 -type f ! -name 'regress-*' -exec ln -s -t "$work/seeds-$h/" {} +
  args=(-max_total_time="$secs" -print_final_stats=1 -timeout=60 -rss_limit_mb=4096
        -artifact_prefix="$work/artifacts-$h/")
  [ -f "$here/$h.dict" ] && args+=(-dict="$here/$h.dict")
  [ "${GF_FUZZ_FORK:-0}" = 1 ] && args+=(-fork=1 -ignore_crashes=1 -ignore_timeouts=1 -ignore_ooms=1)
  "$out/$h" "${args[@]}" "$work/corpus-$h" "$work/seeds-$h" >"$work/$h.log" 2>&1
  rc=$?
  execs=$(grep -o 'stat::number_of_executed_units: [0-9]*' "$work/$h.log" | tail -n 1 | awk '{print $2}')
  if [ -z "$execs" ]; then  # fork mode: the last status line "#N ..."
    execs=$(grep -oE '^#[0-9]+' "$work/$h.log" | tail -n 1 | tr -d '#')
  fi
  execs=${execs:-0}
  total=$((total + execs))
  found=$(find "$work/artifacts-$h" -type f | wc -l)
  if [ "$rc" -ne 0 ] || [ "$found" -gt 0 ]; then
    bad+=("$h")
    echo "$h: $execs executions in ${secs}s: FINDING (exit $rc, $found artifact(s) in $work/artifacts-$h)"
    # What each finding is: its first report line, counted over the inputs.
    find "$work/artifacts-$h" -type f | head -n 50 | while read -r f; do
      "$out/$h" -runs=1 -artifact_prefix="$work/triage-" "$f" 2>&1 |
        grep -m1 -E 'runtime error|fuzz finding|Assertion|ERROR: (Address|Leak|libFuzzer)|==ERROR' |
        sed -E 's/==[0-9]+==//; s/0x[0-9a-f]+/0x../g; s/[0-9]{6,}/N/g' | cut -c1-240
    done | sort | uniq -c
  else
    echo "$h: $execs executions in ${secs}s: no finding"
  fi
done
echo "total: $total executions"
if ((${#bad[@]})); then
  echo "findings in: ${bad[*]} (logs and inputs under $work)"
  exit 1
fi
