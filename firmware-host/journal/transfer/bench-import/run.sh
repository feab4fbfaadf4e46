#!/usr/bin/env bash
# Import of a 20,000-session bundle end to end through the command line,
# this tree's kermalux beside the last commit before sync v2 (08a907f, the
# import the issue measured: JSON-lines batches, the whole bundle held in
# memory), in the same run on the same journal, pairs interleaved.
#   bash firmware-host/journal/transfer/bench-import/run.sh [PAIRS] [SESSIONS]
# Needs git (for the old tree) and /usr/bin/time (GNU time, for peak RSS).
set -euo pipefail
cd "$(dirname "$0")/../../../.."
pairs=${1:-3}
sessions=${2:-20000}
old=08a907f
work=$(mktemp -d /tmp/kx-bench-import.XXXXXX)
trap 'rm -rf "$work"' EXIT
git archive "$old" | (mkdir "$work/old-src" && tar -x -C "$work/old-src")
(cd "$work/old-src" && go build -o "$work/kx-old" ./cmd/kermalux)
go build -o "$work/kx-new" ./cmd/kermalux
go run ./firmware-host/journal/transfer/bench-import --journal "$work/journal.db" --sessions "$sessions"
key=$("$work/kx-new" journal key "$work/journal.db")
"$work/kx-old" bundle --journal "$work/journal.db" --out "$work/old.kxb" >/dev/null 2>&1
"$work/kx-new" bundle --journal "$work/journal.db" --out "$work/new.kxb" >/dev/null 2>&1
echo "bundle sizes: old $(stat -c %s "$work/old.kxb") B, new $(stat -c %s "$work/new.kxb") B"
for i in $(seq "$pairs"); do
  for v in old new; do
    rm -f "$work"/store-$v.db*
    "$work/kx-$v" enroll --store "$work/store-$v.db" --key "$key" --name van >/dev/null
    /usr/bin/time -f "pair $i $v import: %e s wall, %U s user + %S s sys, peak RSS %M KB" \
      "$work/kx-$v" import --store "$work/store-$v.db" "$work/$v.kxb" 2>&1 >/dev/null | tail -1
  done
  echo "load: $(cut -d' ' -f1-3 /proc/loadavg)"
done
