#!/usr/bin/env bash
# Runs one harness once over its committed corpus, without mutating:
#   tests/fuzz/replay.sh <harness binary> <corpus dir>
# Seeds and minimised inputs (everything but regress-*) run in one process;
# the regress-* inputs (past findings) run together in a second one, and when
# that fails, each in a process of its own so that every one that still fails
# is named. Exits non-zero when any input crashes, leaks, trips a sanitizer or
# times out.
set -uo pipefail
# Stack traces for UBSan reports; ASan's leak checking stays on.
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-print_stacktrace=1}
bin=$1
dir=$2
name=$(basename "$bin")
[ -x "$bin" ] || { echo "replay.sh: $bin is not built" >&2; exit 1; }
[ -d "$dir" ] || { echo "replay.sh: no corpus directory $dir" >&2; exit 1; }
log=$(mktemp)
art=$(mktemp -d)  # libFuzzer may write crash-* files: never into the caller's directory
tmp=$(mktemp -d)  # links to the corpus inputs: libFuzzer reads a directory in one process
trap 'rm -rf "$tmp" "$log" "$art"' EXIT
opts=(-runs=0 -timeout=120 -rss_limit_mb=4096 -print_final_stats=0 -artifact_prefix="$art/")
failed=0
mapfile -t plain < <(find "$dir" -maxdepth 1 -type f ! -name 'regress-*' | sort)
mapfile -t regress < <(find "$dir" -maxdepth 1 -type f -name 'regress-*' | sort)
if ((${#plain[@]} == 0)); then echo "$name: the corpus in $dir is empty" >&2; exit 1; fi
# One ln for all (a process per file took longer than the replay itself).
find "$(cd "$dir" && pwd)" -maxdepth 1 -type f ! -name 'regress-*' -exec ln -s -t "$tmp" {} +
if "$bin" "${opts[@]}" "$tmp" >"$log" 2>&1; then
  # libFuzzer must have read every input ("INFO: seed corpus: files: N"); it
  # skips empty files (the empty input always runs first).
  read_n=$(grep -oE 'seed corpus: files: [0-9]+' "$log" | grep -oE '[0-9]+$')
  want=$(find "$dir" -maxdepth 1 -type f ! -name 'regress-*' -size +0c | wc -l)
  if [ "${read_n:-0}" -ne "$want" ]; then
    echo "$name: FAILED: libFuzzer read ${read_n:-no} inputs of $want"; tail -n 20 "$log"; failed=1
  else
    echo "$name: ${#plain[@]} corpus inputs ok"
  fi
else
  echo "$name: FAILED on the corpus:"; tail -n 60 "$log"; failed=1
fi
if ((${#regress[@]})) && "$bin" "${opts[@]}" "${regress[@]}" >"$log" 2>&1; then
  # Every file must have run ("Executed <file> in N ms").
  ran=$(grep -c '^Executed ' "$log")
  if [ "$ran" -ne "${#regress[@]}" ]; then
    echo "$name: FAILED: $ran of ${#regress[@]} regression inputs ran"; tail -n 20 "$log"; failed=1
  else
    for f in "${regress[@]}"; do echo "$name: $(basename "$f") ok"; done
  fi
else
  for f in "${regress[@]}"; do
    if "$bin" "${opts[@]}" "$f" >"$log" 2>&1; then
      echo "$name: $(basename "$f") ok"
    else
      echo "$name: FAILED on regression input $(basename "$f"):"; grep -E 'ERROR|runtime error|finding|Assertion|SUMMARY|#[0-9]+ 0x' "$log" | head -n 25
      failed=1
    fi
  done
fi
exit $failed
