#!/bin/sh
# four_writers.sh - four processes record 100-site batches into one store at
# once: every write must land (no process may fail for want of the store) and
# no stderr may hold a raw SQLite message.
#
# Usage: four_writers.sh PLYLEDGER_BINARY TESTS_CLI_DIR [ROUNDS]
# Environment: PL_PYTHON (Debian's python3 with numpy), TMPDIR.
#
# Each round starts from a fresh store holding four airframes of 100 sites
# and starts the four records together, each of 100 maps of 8 channels of
# 96 x 72 (make_batch.py: the sample fleet's sites, as a reduction records
# them); the store must then hold all 400 inspections and pass PRAGMA
# integrity_check.
set -u
PLY_BIN=$1
HERE=$2
ROUNDS=${3:-5}
PY=${PL_PYTHON:-/usr/bin/python3}
SITES=100
CHANNELS=8
WRITERS="WRA-0001 WRB-0002 WRC-0003 WRD-0004"
WORK=$(mktemp -d "${TMPDIR:-/tmp}/plyledger-writers-XXXXXX")
trap 'rm -rf "$WORK"' EXIT
PREP="$WORK/prepared.plyledger"
# copies of the prepared store write with its seal key
export PLYLEDGER_SEAL_KEY="$PREP.seal-key"
STORE="$WORK/store.plyledger"
FAILS=0
fail() {
    FAILS=$((FAILS + 1))
    echo "FAIL: $*" >&2
}
RAW_SQLITE='database is locked|database table is locked|disk image is malformed|no such table|constraint failed|SQLITE_|sqlite3_'

"$PLY_BIN" create "$PREP" >/dev/null || exit 1
for w in $WRITERS; do
    "$PY" "$HERE/make_batch.py" "$WORK" "$w" "$SITES" "$CHANNELS" || { echo "FAIL: fixtures" >&2; exit 1; }
    "$PLY_BIN" add-airframe --store "$PREP" --serial "$w" --type TX-1 >/dev/null || exit 1
    "$PLY_BIN" import-plan --store "$PREP" --airframe "$w" "$WORK/plan-$w.csv" >/dev/null || exit 1
done

r=0
while [ "$r" -lt "$ROUNDS" ]; do
    r=$((r + 1))
    cp "$PREP" "$STORE"
    pids=""
    for w in $WRITERS; do
        "$PLY_BIN" record --store "$STORE" --sidecar "$WORK/batch-$w.json" -q \
            >"$WORK/out-$w" 2>"$WORK/err-$w" &
        pids="$pids $!"
    done
    set -- $pids
    for w in $WRITERS; do
        wait "$1"
        st=$?
        shift
        [ "$st" -eq 0 ] || { fail "round $r: $w exit $st"; sed 's/^/    /' "$WORK/err-$w" >&2; }
        if grep -Eq "$RAW_SQLITE" "$WORK/err-$w"; then
            fail "round $r: $w: a raw SQLite message on stderr"
        fi
    done
    n=$(sqlite3 "$STORE" "SELECT count(*) FROM inspection")
    want=$((SITES * 4))
    [ "$n" = "$want" ] || fail "round $r: $n inspections recorded, $want written"
    [ "$(sqlite3 "$STORE" 'PRAGMA integrity_check')" = ok ] || fail "round $r: integrity_check"
    echo "# round $r: $n of $want inspections"
done
echo "# $ROUNDS rounds of four writers, $FAILS failure(s)"
[ "$FAILS" -eq 0 ]
