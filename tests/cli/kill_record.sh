#!/bin/sh
# kill_record.sh - SIGKILL a large `plyledger record` at random moments: after
# every kill the store must pass PRAGMA integrity_check and hold the batch's
# inspections wholly or not at all (the batch is one transaction).
#
# Usage: kill_record.sh PLYLEDGER_BINARY TESTS_CLI_DIR
# Environment: PL_PYTHON (Debian's python3 with numpy), TMPDIR; PL_KILL_SEED
# (optional) repeats the moments of an earlier run, whose seed it prints.
#
# The batch: one sidecar recording the baselines of SITES sites of one
# airframe, each with its own map (make_batch.py). A first, whole run
# measures how long the record takes (T) and when it starts writing (W); then
# each round copies the prepared store, starts the record and kills it after a
# moment drawn uniformly from [0, T) or, every other round, from [W, T). A round
# whose record finished before its kill counts as no kill (and shortens T); the test needs
# KILLS kills that landed, a quarter of them at least while the record was
# writing (its rollback journal or write-ahead log left behind); rounds go on
# (up to 5 KILLS) until both are met, and a kill meant for the writing part
# that came before it moves W up to its moment, as a busy machine needs.
set -u
PLY_BIN=$1
HERE=$2
PY=${PL_PYTHON:-/usr/bin/python3}
SITES=100
KILLS=20
WORK=$(mktemp -d "${TMPDIR:-/tmp}/plyledger-kill-XXXXXX")
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
now() { date +%s.%N; }

# ---- the batch and the prepared store -----------------------------------------

"$PY" "$HERE/make_batch.py" "$WORK" KIL-0001 "$SITES" || { echo "FAIL: fixtures" >&2; exit 1; }
prep() {
    "$PLY_BIN" "$@" >"$WORK/prep.out" 2>&1 || {
        echo "FAIL: preparing the store: plyledger $*" >&2
        sed 's/^/    /' "$WORK/prep.out" >&2
        exit 1
    }
}
prep create "$PREP"
prep add-airframe --store "$PREP" --serial KIL-0001 --type TX-1
prep import-plan --store "$PREP" --airframe KIL-0001 "$WORK/plan-KIL-0001.csv"

count() { sqlite3 "$STORE" "SELECT (SELECT count(*) FROM inspection) || ' ' || (SELECT count(*) FROM map)" 2>&1; }

# ---- a whole run: the duration -------------------------------------------------

cp "$PREP" "$STORE"
t0=$(now)
"$PLY_BIN" record --store "$STORE" --sidecar "$WORK/batch-KIL-0001.json" -q >"$WORK/out" 2>&1 &
pid=$!
# when the record starts writing: its journal or write-ahead log appears (the
# record reads and checks the whole batch first, then inserts it)
W=""
while kill -0 "$pid" 2>/dev/null; do
    if [ -z "$W" ] && { [ -s "$STORE-wal" ] || [ -s "$STORE-journal" ]; }; then
        W=$(echo "$(now) $t0" | awk '{ printf "%.3f", $1 - $2 }')
    fi
    sleep 0.01
done
wait "$pid" || { fail "the whole record failed"; sed 's/^/    /' "$WORK/out" >&2; exit 1; }
T=$(echo "$(now) $t0" | awk '{ printf "%.3f", $1 - $2 }')
[ -n "$W" ] || W=0
[ "$(count)" = "$SITES $SITES" ] || fail "the whole record holds $(count) inspections and maps, not $SITES $SITES"
echo "# the whole record of $SITES sites takes $T s, writing from $W s"

# ---- the kills ---------------------------------------------------------------------

SEED=${PL_KILL_SEED:-$(od -An -N4 -tu4 /dev/urandom | tr -d ' ')}
echo "# moments drawn with PL_KILL_SEED=$SEED"
# every other moment from the whole run [0, T), the others from its writing
# part [W, T): the writing part is short beside the reading and checking, and
# the test needs kills in both. Moments are drawn round by round: when a
# record ends before its kill (the machine ran faster than in the whole run,
# as a shared machine does), T shrinks to that moment and W with it, so the
# later moments still fall inside the record.
FRACTIONS=$(awk -v s="$SEED" -v n=$((KILLS * 5)) \
    'BEGIN { srand(s); for (i = 0; i < n; i++) printf "%.6f\n", rand() }')
# moment R: round R's moment, from the R-th fraction and today's T and W
moment() {
    echo "$FRACTIONS" | awk -v r="$1" -v t="$T" -v w="$W" \
        'NR == r + 1 { printf "%.3f\n", r % 2 ? w + $1 * (t - w) : $1 * t }'
}
# shrink M: the record ended before M; T becomes M and W keeps its share
shrink() {
    W=$(awk -v w="$W" -v t="$T" -v m="$1" 'BEGIN { printf "%.3f", m < t ? w * m / t : w }')
    T=$(awk -v t="$T" -v m="$1" 'BEGIN { printf "%.3f", m < t ? m : t }')
}
# later M: a kill at M meant for the writing part came before it; writing
# starts after M on this machine now, so W moves up to M (below T)
later() {
    W=$(awk -v w="$W" -v t="$T" -v m="$1" 'BEGIN { printf "%.3f", m > w && m < t ? m : w }')
}
kills=0 whole=0 none=0 rounds=0 writing=0
# until both quotas are met: the kills, and a quarter of them while writing
while { [ "$kills" -lt "$KILLS" ] || [ "$writing" -lt $((KILLS / 4)) ]; } &&
      [ "$rounds" -lt $((KILLS * 5)) ]; do
    m=$(moment "$rounds")
    rounds=$((rounds + 1))
    cp "$PREP" "$STORE"
    rm -f "$STORE-wal" "$STORE-shm" "$STORE-journal"
    "$PLY_BIN" record --store "$STORE" --sidecar "$WORK/batch-KIL-0001.json" -q >"$WORK/out" 2>&1 &
    pid=$!
    sleep "$m"
    if kill -KILL "$pid" 2>/dev/null; then
        { wait "$pid"; } 2>/dev/null
        st=$?
        if [ "$st" -ne 137 ]; then
            echo "# round $rounds: the record had ended (status $st) as it was killed"
            shrink "$m"
            continue
        fi
        kills=$((kills + 1))
    else
        wait "$pid"
        shrink "$m"
        continue
    fi
    # a journal or write-ahead log left behind: the kill came while writing
    if [ -s "$STORE-wal" ] || [ -s "$STORE-journal" ]; then
        writing=$((writing + 1))
        phase=writing
    else
        phase=before
        [ $((rounds % 2)) -eq 0 ] && later "$m"
    fi
    ic=$(sqlite3 "$STORE" "PRAGMA integrity_check" 2>&1)
    [ "$ic" = ok ] || fail "killed at $m s: integrity_check says: $ic"
    c=$(count)
    case "$c" in
        "0 0") none=$((none + 1)) ;;
        "$SITES $SITES") whole=$((whole + 1)) ;;
        *) fail "killed at $m s: the store holds $c inspections and maps (0 0 or $SITES $SITES expected)" ;;
    esac
    echo "# killed at $m s ($phase): $c"
    if [ "$c" = "0 0" ] && [ "$none" -eq 1 ]; then
        # a store killed mid-record takes the same batch afterwards
        "$PLY_BIN" record --store "$STORE" --sidecar "$WORK/batch-KIL-0001.json" -q >"$WORK/out" 2>&1 \
            || { fail "after a kill the record fails"; sed 's/^/    /' "$WORK/out" >&2; }
        [ "$(count)" = "$SITES $SITES" ] || fail "after a kill the record holds $(count)"
    fi
done
echo "# $kills kills in $rounds rounds ($writing while writing): $none left nothing, $whole the whole batch; $FAILS failure(s)"
[ "$kills" -ge "$KILLS" ] || fail "only $kills kills landed (of $KILLS wanted)"
[ "$writing" -ge $((KILLS / 4)) ] || fail "only $writing kills came while the record was writing"
[ "$FAILS" -eq 0 ]
