#!/usr/bin/env bash
# Makes testdata/state/v1-tallowwood.db, a state file of schema version 1 (the
# format before the file carried a version), with the code of the release
# that wrote that format: two simulated days of the demo farm (hour bins,
# records, night cloudiness carries, alerts, zone balances and a command
# ledger, the local history) plus a few store points pending in the outbox.
# The migration test in gateway/state reads the file; run this only to make
# it again, and commit the result.
#
#   bash testdata/state/gen/gen.sh [REV]    # REV: default ca207a8
set -euo pipefail
rev=${1:-ca207a8}
top=$(git rev-parse --show-toplevel)
out="$top/testdata/state/v1-tallowwood.db"
wt=$(mktemp -d)
git -C "$top" worktree add -q --detach "$wt" "$rev"
trap 'git -C "$top" worktree remove --force "$wt"' EXIT
rm -f "$out"
(cd "$wt" && go run ./cmd/etpulse demo --days 2 --seed 7 --state "$out" >/dev/null)
mkdir -p "$wt/cmd/genoutbox"
cp "$top/testdata/state/gen/outbox.go.txt" "$wt/cmd/genoutbox/main.go"
(cd "$wt" && go run ./cmd/genoutbox "$out")
echo "wrote $out from $rev"
