#!/bin/sh
# tamper.sh - attacks on a store file made as someone with write access
# would make them (the sqlite3 shell, raw bytes, a forger who knows the
# documented encodings), each of which plyledger verify must name.
#
# Usage: tamper.sh PLYLEDGER_BINARY TESTS_CLI_DIR
# Environment: PL_PYTHON (Debian's python3), PL_WRAP (optional prefix for
# the verify runs, e.g. valgrind), PL_EVERY=N (only every N-th attack, the
# first included), TMPDIR.
#
# The table, tamper.tsv: one case a line, fields separated by a tab, '#'
# starts a comment line.
#   name     unique, what the attack is
#   exit     what verify must give: 1 (a fault named) or 0 (intact: an attack
#            the chain cannot see, kept here so that the limit stays known)
#   words    fixed strings separated by ';' that the first stderr line (exit
#            1) or stdout (exit 0) must hold
#   edit     a shell command line run on $T, a copy of the prepared store:
#            sql "..." runs SQL on it; bare TRIGGERS "..." runs SQL with the
#            named triggers (comma separated) dropped and put back as they
#            were; bytes OLD NEW replaces every occurrence of a text in the
#            file's raw bytes (same length); forge runs tests/ref's forger;
#            reseal removes the seal and seals the store with a new key
#   verify   optional extra arguments of verify ($HEADS: heads kept from the
#            prepared store)
set -u
PLY_BIN=$1
HERE=$2
case "$PLY_BIN" in /*) ;; *) PLY_BIN=$PWD/$PLY_BIN ;; esac
case "$HERE" in /*) ;; *) HERE=$PWD/$HERE ;; esac
TABLE=$HERE/tamper.tsv
REF=$HERE/../ref
PY=${PL_PYTHON:-/usr/bin/python3}
WRAP=${PL_WRAP:-}
EVERY=${PL_EVERY:-1}
case "$EVERY" in ''|*[!0-9]*|0) echo "FAIL: PL_EVERY=$EVERY is not a whole number above 0" >&2; exit 1 ;; esac
SEEN=0 SKIPPED=0
WORK=$(mktemp -d "${TMPDIR:-/tmp}/plyledger-tamper-XXXXXX")
trap 'rm -rf "$WORK"' EXIT
W="$WORK/in"
PREP="$WORK/prepared.plyledger"
# copies of the prepared store write with its seal key
export PLYLEDGER_SEAL_KEY="$PREP.seal-key"
T="$WORK/tampered.plyledger"
HEADS="$WORK/heads.json"
TRACE="--procedure NDT-TEST-01 --procedure-rev A --equipment test-rig --calibration RS-T1 --inspector tester --level 2"
mkdir "$W"

prep() {
    "$PLY_BIN" "$@" >"$WORK/prep.out" 2>&1
    st=$?
    case "$st" in 0 | 3 | 4) ;; *)
        echo "FAIL: preparing the store: plyledger $* (exit $st)" >&2
        sed 's/^/    /' "$WORK/prep.out" >&2
        exit 1 ;;
    esac
}
"$HERE/make_fixtures.sh" "$W" || { echo "FAIL: fixtures" >&2; exit 1; }
cat >"$W/criteria.json" <<'JSON'
{ "format": "plyledger-criteria", "format_version": 1, "name": "TEST-LIMITS", "revision": "A",
  "source_document": "TEST-DOC-01", "example_values": true, "repeatability": { "area_mm2": 10 },
  "rules": [ { "name": "skin", "kind": "growth-limit", "method": "flash-thermography",
    "quantity": "temperature-contrast", "contrast_unit": "K", "repeatability_contrast": 0.05,
    "min_reportable_area_mm2": 25, "new_reportable_area_mm2": 50, "area_growth_mm2": 40,
    "area_growth_percent": 25, "vanished": "report" } ] }
JSON
export PLYLEDGER_STORE="$PREP"
prep create "$PREP"
prep add-airframe --serial TST-0001 --type TX-1 --manufactured 2015-01-15 --operator "Test Operator One"
prep add-airframe --serial TST-0002 --type TX-1 --manufactured 2015-02-20 --operator "Test Operator Two"
prep import-plan --airframe TST-0001 "$W/plan.csv"
prep import-plan --airframe TST-0002 "$W/plan.csv"
prep record --airframe TST-0001 --site T01 --kind baseline --date 2015-02-01 $TRACE \
    --map "$W/t01_base.npy" --quantity temperature-contrast
prep record --airframe TST-0002 --site T02 --kind baseline --date 2015-03-10 $TRACE \
    --map "$W/t01_base.npy" --quantity temperature-contrast
prep record --airframe TST-0002 --site T02 --kind scheduled --date 2020-03-10 $TRACE \
    --map "$W/t01_noisy.npy" --quantity temperature-contrast
prep register --airframe TST-0002 --site T02 -q
prep criteria import "$W/criteria.json"
prep compare --airframe TST-0002 --site T02 --criteria TEST-LIMITS -q
# a signed interpretation and disposition of the comparison's first change
prep new-key "$WORK/eng.key"
prep people add --handle e.tester --name "E. Tester" --role engineer
prep people add-key --handle e.tester --key "$WORK/eng.key" --from 2020-01-01
CMP=$(sqlite3 "$PREP" "SELECT max(id) FROM comparison WHERE status = 'done'")
prep interpret --comparison "$CMP" --change 1 --as relevant --by e.tester --key "$WORK/eng.key" --date 2020-03-20
prep dispose --comparison "$CMP" --change 1 --decision accept --by e.tester --key "$WORK/eng.key" --date 2020-03-21
prep verify --keep-heads "$HEADS"
unset PLYLEDGER_STORE

sql() { sqlite3 "$T" "$@"; }
bare() {
    _defs=""
    for _t in $(echo "$1" | tr ',' ' '); do
        _defs="$_defs$(sqlite3 "$T" "SELECT sql FROM sqlite_master WHERE name = '$_t'");"
        sqlite3 "$T" "DROP TRIGGER $_t" || return 125
    done
    sqlite3 "$T" "$2" || return 125
    sqlite3 "$T" "$_defs" || return 125
}
bytes() {
    "$PY" - "$T" "$1" "$2" <<'PY' || return 125
import sys
path, old, new = sys.argv[1], sys.argv[2].encode(), sys.argv[3].encode()
assert len(old) == len(new)
data = open(path, "rb").read()
assert old in data, "text not in the file"
open(path, "wb").write(data.replace(old, new))
PY
}
forge() { "$PY" "$REF/ledger_forge.py" "$T" || return 125; }
# every trace of the seal removed, then the store sealed anew with a key
# of the attacker's own
reseal() {
    bare seal_key_no_delete,ledger_seal_no_delete "DELETE FROM ledger_seal; DELETE FROM seal_key" &&
        rm -f "$WORK/other.key" &&
        "$PLY_BIN" seal -q --store "$T" --seal-key "$WORK/other.key" || return 125
}

FAILS=0
COUNT=0
NAMES=""
fail() {
    FAILS=$((FAILS + 1))
    echo "FAIL: $*" >&2
}
tab=$(printf '\t')
line=0
while IFS="$tab" read -r name want words edit vargs; do
    line=$((line + 1))
    case "$name" in '#'* | '') continue ;; esac
    case "$NAMES" in *"|$name|"*) fail "$TABLE:$line: case '$name' named twice"; continue ;; esac
    NAMES="$NAMES|$name|"
    SEEN=$((SEEN + 1))
    # PL_EVERY=N: only every N-th case (the first, the N+1-th, ...)
    if [ $(( (SEEN - 1) % EVERY )) -ne 0 ]; then SKIPPED=$((SKIPPED + 1)); continue; fi
    COUNT=$((COUNT + 1))
    cp "$PREP" "$T"
    rm -f "$T-wal" "$T-shm" "$T-journal"
    if ! (eval "$edit") </dev/null >"$WORK/edit.out" 2>&1; then
        fail "$name: the attack itself failed"
        sed 's/^/    /' "$WORK/edit.out" >&2
        continue
    fi
    # shellcheck disable=SC2086
    eval "$WRAP \"\$PLY_BIN\" verify --store \"\$T\" $vargs" </dev/null >"$WORK/out" 2>"$WORK/err"
    got=$?
    if [ "$got" -ne "$want" ]; then
        fail "$name: verify exit $got, expected $want"
        sed 's/^/    stderr: /' "$WORK/err" >&2
        continue
    fi
    if [ "$want" -eq 1 ]; then seen=$(head -1 "$WORK/err"); else seen=$(cat "$WORK/out"); fi
    rest=$words
    while [ -n "$rest" ]; do
        word=${rest%%;*}
        [ "$word" = "$rest" ] && rest="" || rest=${rest#*;}
        case "$seen" in
            *"$word"*) ;;
            *) fail "$name: verify does not say '$word'"; echo "    $seen" | head -3 >&2 ;;
        esac
    done
    [ "$want" -eq 1 ] && printf '%-58s %s\n' "$name" "$(head -1 "$WORK/err" | cut -c1-150)"
done <"$TABLE"

echo "$COUNT attacks of $(basename "$TABLE") made ($SKIPPED left out by PL_EVERY=$EVERY), $FAILS failure(s)"
[ "$COUNT" -gt 0 ] && [ "$FAILS" -eq 0 ]
