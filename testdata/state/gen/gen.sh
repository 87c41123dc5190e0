#!/usr/bin/env bash
# Makes a state file of an older schema version with the code of the release
# that wrote that format: two simulated days of the demo farm (hour bins,
# records, night cloudiness carries, alerts, zone balances and a command
# ledger, the local history) plus a few store points pending in the outbox.
# The migration tests in gateway/state read the files; run this only to make
# one again, and commit the result.
#
#   bash testdata/state/gen/gen.sh [VERSION [REV]]
#
# VERSION v1 (default): testdata/state/v1-tallowwood.db, the format before
# the file carried a version, from ca207a8. VERSION v2:
# testdata/state/v2-tallowwood.db, from 9412b9e. VERSION v2-names:
# testdata/state/v2-names.db, also from 9412b9e, made by names.go.txt alone
# (no demo): pending hour points and zone faults with the names before
# schema version 3.
set -euo pipefail
ver=${1:-v1}
case $ver in
v1) rev=${2:-ca207a8} ;;
v2 | v2-names) rev=${2:-9412b9e} ;;
*) echo "gen.sh: unknown version $ver (want v1, v2 or v2-names)" >&2; exit 2 ;;
esac
top=$(git rev-parse --show-toplevel)
out="$top/testdata/state/$ver-tallowwood.db"
[ "$ver" = v2-names ] && out="$top/testdata/state/v2-names.db"
wt=$(mktemp -d)
git -C "$top" worktree add -q --detach "$wt" "$rev"
trap 'git -C "$top" worktree remove --force "$wt"' EXIT
rm -f "$out"
if [ "$ver" = v2-names ]; then
	mkdir -p "$wt/cmd/gennames"
	cp "$top/testdata/state/gen/names.go.txt" "$wt/cmd/gennames/main.go"
	(cd "$wt" && go run ./cmd/gennames "$out")
	echo "wrote $out from $rev"
	exit 0
fi
(cd "$wt" && go run ./cmd/etpulse demo --days 2 --seed 7 --state "$out" >/dev/null)
mkdir -p "$wt/cmd/genoutbox"
cp "$top/testdata/state/gen/outbox.go.txt" "$wt/cmd/genoutbox/main.go"
(cd "$wt" && go run ./cmd/genoutbox "$out")
echo "wrote $out from $rev"
