#!/bin/sh
# run_corpus.sh - the hostile-input corpus: every case of a table run against
# the same prepared store.
#
# Usage: run_corpus.sh PLYLEDGER_BINARY TESTS_CLI_DIR [TABLE]
#   TABLE defaults to TESTS_CLI_DIR/corpus.tsv (corpus-pending.tsv holds the
#   cases today's code gets wrong; run it the same way to see which now pass).
# Environment: PL_PYTHON (Debian's python3 with numpy and pypng), PL_WRAP
# (optional command prefix for the cases, e.g. valgrind), PL_EVERY=N (run only
# every N-th case of the table, the first included: valgrind's quick share),
# TMPDIR.
#
# The table: one case a line, fields separated by a tab; '#' starts a
# comment line.
#   name      unique, what the case is
#   exit      the exit status it must give: 1 (refused) or 2 (misuse)
#   words     what stderr must say, fixed strings separated by ';', all of
#             them on one line: for exit 1 stderr is exactly that line; for
#             exit 2 it is the first (the usage follows)
#   command   a shell command line, evaluated in the fixtures folder with
#             ply (plyledger, under PL_WRAP), $W (the fixtures folder),
#             $STORE (also PLYLEDGER_STORE), $TRACE (the traceability
#             options), $BASE_MAP and $PNG_MAP (map ids of the prepared
#             store), and `with_link PATH command...` (`with_symlink`): the
#             command run while PATH is a hard (symbolic) link to the store
#   after     optional: a shell condition that must hold after the case
#             (evaluated as the command is)
#
# Each case starts from a fresh copy of the prepared store. After it the
# store's full SQL dump (sqlite3 .dump) must equal the prepared store's, it
# must pass PRAGMA integrity_check, stderr must hold no raw SQLite message,
# and no temporary output (*.partial) may be left beside the store or in
# the fixtures folder. The preparation (make_fixtures.sh, corpus_inputs.sh and the
# commands building the store) runs without PL_WRAP.
set -u
PLY_BIN=$1
HERE=$2
case "$PLY_BIN" in /*) ;; *) PLY_BIN=$PWD/$PLY_BIN ;; esac
case "$HERE" in /*) ;; *) HERE=$PWD/$HERE ;; esac
TABLE=${3:-$HERE/corpus.tsv}
PY=${PL_PYTHON:-/usr/bin/python3}
WRAP=${PL_WRAP:-}
EVERY=${PL_EVERY:-1}
case "$EVERY" in ''|*[!0-9]*|0) echo "FAIL: PL_EVERY=$EVERY is not a whole number above 0" >&2; exit 1 ;; esac
SEEN=0 SKIPPED=0
WORK=$(mktemp -d "${TMPDIR:-/tmp}/plyledger-corpus-XXXXXX")
trap 'rm -rf "$WORK"' EXIT
W="$WORK/in"
STORE="$WORK/store.plyledger"
PREP="$WORK/prepared.plyledger"
# copies of the prepared store write with its seal key
export PLYLEDGER_SEAL_KEY="$PREP.seal-key"
TRACE="--procedure NDT-TEST-01 --procedure-rev A --equipment test-rig --calibration RS-T1 --inspector tester --level 2"
export PLYLEDGER_STORE="$STORE"
mkdir "$W"

# ---- the prepared store -----------------------------------------------------------

prep() {
    "$PLY_BIN" "$@" >"$WORK/prep.out" 2>&1 || {
        echo "FAIL: preparing the store: plyledger $*" >&2
        sed 's/^/    /' "$WORK/prep.out" >&2
        exit 1
    }
}
"$HERE/make_fixtures.sh" "$W" || { echo "FAIL: fixtures" >&2; exit 1; }
prep create "$PREP"
export PLYLEDGER_STORE="$PREP"
prep add-airframe --serial TST-0001 --type TX-1 --manufactured 2015-01-15 --operator "Test Operator One"
prep add-airframe --serial TST-0002 --type TX-1
prep import-plan --airframe TST-0001 "$W/plan.csv"
prep import-plan --airframe TST-0002 "$W/plan.csv"
prep record --airframe TST-0001 --site T01 --kind baseline --date 2015-02-01 --hours 0 --cycles 0 \
    $TRACE --map "$W/t01_base.npy" --quantity temperature-contrast
prep record --airframe TST-0001 --site T01 --kind scheduled --date 2020-03-01 --task HC-1 \
    --hours 9000 --cycles 6100 $TRACE --map "$W/grey16.png" --quantity phase --unit rad
prep record --airframe TST-0001 --site T02 --kind baseline --date 2015-02-01 $TRACE \
    --map "$W/t02_two.npy" --quantity temperature-contrast,amplitude --unit K,K
prep record --airframe TST-0002 --site T01 --kind baseline --date 2015-03-10 $TRACE \
    --map "$W/t01_f64.npy" --quantity temperature-contrast
prep add-airframe --serial TST-0003 --type TX-1 --manufactured 2016-06-01
prep import-plan --airframe TST-0003 "$W/plan.csv"
prep record --airframe TST-0002 --site T02 --kind baseline --date 2015-03-10 $TRACE \
    --map "$W/t01_base.npy" --quantity temperature-contrast
prep record --airframe TST-0002 --site T02 --kind scheduled --date 2020-03-10 $TRACE \
    --map "$W/t01_noisy.npy" --quantity temperature-contrast
prep simulate "$W/scene.json" --output "$W/seq.json" -q
prep reduce "$W/seq.json" --at 0.3 --airframe TST-0001 --site T03 --kind baseline --date 2015-05-05 $TRACE -q
prep history --airframe TST-0001 --site T01 --json
BASE_MAP=$("$PY" -c 'import json,sys; print(json.load(open(sys.argv[1]))["inspections"][0]["maps"][0]["map"])' "$WORK/prep.out")
PNG_MAP=$("$PY" -c 'import json,sys; print(json.load(open(sys.argv[1]))["inspections"][1]["maps"][0]["map"])' "$WORK/prep.out")
"$HERE/corpus_inputs.sh" "$W" || { echo "FAIL: corpus inputs" >&2; exit 1; }
prep criteria import "$W/criteria_ok.json"
cp "$PREP" "$W/newer.plyledger"
sqlite3 "$W/newer.plyledger" "PRAGMA user_version = 99"
sqlite3 "$PREP" .dump >"$WORK/prepared.sql" || { echo "FAIL: cannot dump the prepared store" >&2; exit 1; }
export PLYLEDGER_STORE="$STORE"

# ---- the cases -------------------------------------------------------------------

ply() { $WRAP "$PLY_BIN" "$@"; }
with_link() {
    _l=$1; shift
    ln -f "$STORE" "$_l" || return 125
    "$@"
    _st=$?
    rm -f "$_l"
    return $_st
}
with_symlink() {
    _l=$1; shift
    ln -sf "$STORE" "$_l" || return 125
    "$@"
    _st=$?
    rm -f "$_l"
    return $_st
}

FAILS=0
COUNT=0
NAMES=""
fail() {
    FAILS=$((FAILS + 1))
    echo "FAIL: $*" >&2
}
show() {
    sed 's/^/    stderr: /' "$WORK/err" >&2
    sed 's/^/    stdout: /' "$WORK/out" | head -10 >&2
}

# the words of raw SQLite messages, which a refusal must put in plain words
# (a plain message may quote SQLite's reason after it, as "not a plyledger
# store (file is not a database)" does)
RAW_SQLITE='database is locked|database table is locked|disk image is malformed|no such table|no such column|constraint failed|SQLITE_|sqlite3_'

tab=$(printf '\t')
line=0
while IFS="$tab" read -r name want words cmd after; do
    line=$((line + 1))
    case "$name" in '#'* | '') continue ;; esac
    if [ -z "$cmd" ] || [ -z "$words" ]; then
        fail "$TABLE:$line: a case needs a name, an exit status, words and a command"
        continue
    fi
    case "$want" in 1 | 2) ;; *) fail "$TABLE:$line: exit status '$want' is not 1 or 2"; continue ;; esac
    case "$NAMES" in *"|$name|"*) fail "$TABLE:$line: case '$name' named twice"; continue ;; esac
    NAMES="$NAMES|$name|"
    SEEN=$((SEEN + 1))
    # PL_EVERY=N: only every N-th case (the first, the N+1-th, ...)
    if [ $(( (SEEN - 1) % EVERY )) -ne 0 ]; then SKIPPED=$((SKIPPED + 1)); continue; fi
    COUNT=$((COUNT + 1))
    cp "$PREP" "$STORE"
    rm -f "$STORE-wal" "$STORE-shm" "$STORE-journal"
    (cd "$W" && eval "$cmd") </dev/null >"$WORK/out" 2>"$WORK/err"
    got=$?
    if [ "$got" -ne "$want" ]; then
        fail "$name: exit $got, expected $want"
        show
    else
        if [ "$want" -eq 1 ]; then
            n=$(grep -c '' "$WORK/err")
            [ "$n" -eq 1 ] || { fail "$name: $n lines on stderr, expected 1"; show; }
        fi
        first=$(head -1 "$WORK/err")
        rest=$words
        while [ -n "$rest" ]; do
            word=${rest%%;*}
            [ "$word" = "$rest" ] && rest="" || rest=${rest#*;}
            case "$first" in
                *"$word"*) ;;
                *) fail "$name: stderr lacks '$word'"; show ;;
            esac
        done
    fi
    if grep -Eq "$RAW_SQLITE" "$WORK/err"; then
        fail "$name: a raw SQLite message on stderr"
        show
    fi
    if ! sqlite3 "$STORE" .dump >"$WORK/after.sql" 2>&1 || ! cmp -s "$WORK/prepared.sql" "$WORK/after.sql"; then
        fail "$name: the store changed"
        diff "$WORK/prepared.sql" "$WORK/after.sql" | head -6 | cut -c1-160 | sed 's/^/    /' >&2
    elif [ "$(sqlite3 "$STORE" 'PRAGMA integrity_check' 2>&1)" != ok ]; then
        fail "$name: the store fails PRAGMA integrity_check"
    fi
    partial=$(ls -A "$WORK" "$W" | grep '\.partial$')
    if [ -n "$partial" ]; then
        fail "$name: temporary files left: $(echo $partial)"
        (cd "$WORK" && rm -f $partial)
        (cd "$W" && rm -f $partial)
    fi
    if [ -n "$after" ] && ! (cd "$W" && eval "$after") </dev/null >/dev/null 2>&1; then
        fail "$name: afterwards, not: $after"
    fi
done <"$TABLE"

echo "$COUNT cases of $(basename "$TABLE") run ($SKIPPED left out by PL_EVERY=$EVERY), $FAILS failure(s)"
[ "$COUNT" -gt 0 ] && [ "$FAILS" -eq 0 ]
