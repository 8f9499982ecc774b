#!/bin/sh
# package.sh - a hand-over package checked as a receiver without plyledger
# would check it, by the steps README.md ("Hand-over package") gives: the
# sqlite3 shell, xxd, sha256sum and openssl (Ed25519, RFC 8032), and
# tests/ref/ledger_ref.py (Python's sqlite3, struct and hashlib) for the
# links and row hashes. Each step must pass on the package plyledger
# wrote and fail on a package altered behind its back.
#
# Usage: package.sh PLYLEDGER_BINARY TESTS_CLI_DIR
# Environment: PL_PYTHON (Debian's python3), PL_WRAP (optional prefix of
# the plyledger runs, e.g. valgrind), TMPDIR.
set -u
PLY_BIN=$1
HERE=$2
case "$PLY_BIN" in /*) ;; *) PLY_BIN=$PWD/$PLY_BIN ;; esac
case "$HERE" in /*) ;; *) HERE=$PWD/$HERE ;; esac
REF=$HERE/../ref
PY=${PL_PYTHON:-/usr/bin/python3}
WRAP=${PL_WRAP:-}
WORK=$(mktemp -d "${TMPDIR:-/tmp}/plyledger-package-XXXXXX")
trap 'rm -rf "$WORK"' EXIT
W="$WORK/in"
mkdir "$W"
FAILS=0
fail() {
    FAILS=$((FAILS + 1))
    echo "FAIL: $*" >&2
}

prep() {
    $WRAP "$PLY_BIN" "$@" >"$WORK/prep.out" 2>&1
    st=$?
    case "$st" in 0 | 3 | 4) ;; *)
        echo "FAIL: preparing the store: plyledger $* (exit $st)" >&2
        sed 's/^/    /' "$WORK/prep.out" >&2
        exit 1 ;;
    esac
}

# ---- a sending store with maps, criteria, people and a signed disposition --------
"$HERE/make_fixtures.sh" "$W" || { echo "FAIL: fixtures" >&2; exit 1; }
cat >"$W/criteria.json" <<'JSON'
{ "format": "plyledger-criteria", "format_version": 1, "name": "TEST-LIMITS", "revision": "A",
  "source_document": "TEST-DOC-01", "example_values": true, "repeatability": { "area_mm2": 10 },
  "rules": [ { "name": "skin", "kind": "growth-limit", "method": "flash-thermography",
    "quantity": "temperature-contrast", "contrast_unit": "K", "repeatability_contrast": 0.05,
    "min_reportable_area_mm2": 25, "new_reportable_area_mm2": 50, "area_growth_mm2": 40,
    "area_growth_percent": 25, "vanished": "report" } ] }
JSON
SRC="$WORK/sender.plyledger"
export PLYLEDGER_STORE="$SRC"
TRACE="--procedure NDT-TEST-01 --procedure-rev A --equipment test-rig --calibration RS-T1 --inspector tester --level 2"
prep create "$SRC"
prep add-airframe --serial TST-0001 --type TX-1 --manufactured 2015-01-15 --operator "Test Operator One"
prep add-airframe --serial TST-0002 --type TX-1 --manufactured 2015-02-20 --operator "Test Operator Two"
prep import-plan --airframe TST-0001 "$W/plan.csv"
prep import-plan --airframe TST-0002 "$W/plan.csv"
prep record --airframe TST-0002 --site T02 --kind baseline --date 2015-03-10 $TRACE \
    --map "$W/t01_base.npy" --quantity temperature-contrast
prep record --airframe TST-0002 --site T02 --kind scheduled --date 2020-03-10 $TRACE \
    --map "$W/t01_noisy.npy" --quantity temperature-contrast
prep register --airframe TST-0002 --site T02 -q
prep criteria import "$W/criteria.json"
prep compare --airframe TST-0002 --site T02 --criteria TEST-LIMITS -q
prep new-key "$WORK/eng.key"
prep people add --handle e.tester --name "E. Tester" --role engineer
prep people add-key --handle e.tester --key "$WORK/eng.key" --from 2020-01-01
CMP=$(sqlite3 "$SRC" "SELECT max(id) FROM comparison WHERE status = 'done'")
prep interpret --comparison "$CMP" --change 1 --as relevant --by e.tester --key "$WORK/eng.key" --date 2020-03-20
prep dispose --comparison "$CMP" --change 1 --decision accept --by e.tester --key "$WORK/eng.key" --date 2020-03-21
PKG="$WORK/TST-0002.plpkg"
prep package export --airframe TST-0002 --output "$PKG"
# the fingerprint the sender gives the receiver apart from the package
GIVEN=$(sed -n 's/.*sealed with seal key \([0-9a-f]*\):.*/\1/p' "$WORK/prep.out")
[ ${#GIVEN} -eq 32 ] || { echo "FAIL: export printed no fingerprint" >&2; cat "$WORK/prep.out" >&2; exit 1; }
unset PLYLEDGER_STORE

# ---- the receiver's checks, as README.md gives them --------------------------------
q() { sqlite3 "$P" "$@"; }
m() { sqlite3 "$P" "SELECT value FROM package_manifest WHERE name = '$1'"; }

# An Ed25519 public key (64 hex digits) as a PEM file openssl reads.
key_pem() {
    printf '302a300506032b6570032100%s' "$1" | xxd -r -p >"$WORK/key.der" &&
        openssl pkey -pubin -inform DER -in "$WORK/key.der" -out "$2" 2>/dev/null
}

# verify MESSAGE_FILE SIGNATURE_HEX KEY_HEX: exit 0 when the signature holds
ed25519_ok() {
    key_pem "$3" "$WORK/v.pem" || return 1
    printf '%s' "$2" | xxd -r -p >"$WORK/v.sig"
    openssl pkeyutl -verify -pubin -inkey "$WORK/v.pem" -rawin -in "$1" \
        -sigfile "$WORK/v.sig" >/dev/null 2>&1
}

step_file() {
    [ "$(q 'PRAGMA journal_mode')" = delete ] || return 1
    [ "$(q 'PRAGMA application_id')" = 1349286224 ] || return 1
    [ "$(q 'PRAGMA integrity_check')" = ok ]
}

step_fingerprint() {
    KEY=$(m seal_key)
    [ "$(printf %s "$KEY" | xxd -r -p | sha256sum | cut -c1-32)" = "$GIVEN" ] &&
        [ "$(q "SELECT public_key FROM seal_key WHERE origin = 'own'")" = "$KEY" ]
}

step_manifest() {
    { echo 'plyledger-package-manifest 1'
      q "SELECT name || '=' || value FROM package_manifest
         WHERE name <> 'manifest_signature' ORDER BY name"; } >"$WORK/manifest.txt"
    ed25519_ok "$WORK/manifest.txt" "$(m manifest_signature)" "$(m seal_key)"
}

# Every link's seal: Ed25519 over "PLSL", 1 as a little-endian u32 and the
# link's 32 bytes, by the own key (a received key: only for its chain, up
# to its through_seq, and endorsed by the own key).
step_seals() {
    q "SELECT l.link, hex(x.seal), k.public_key FROM ledger l
       JOIN ledger_seal x ON x.ledger_id = l.id JOIN seal_key k ON k.id = x.key_id
       WHERE k.origin = 'own' ORDER BY l.id" >"$WORK/seals" || return 1
    [ "$(wc -l <"$WORK/seals")" -eq "$(q 'SELECT count(*) FROM ledger')" ] || return 1
    while IFS='|' read -r link seal key; do
        printf '504c534c01000000%s' "$link" | xxd -r -p >"$WORK/seal.msg"
        ed25519_ok "$WORK/seal.msg" "$seal" "$key" || return 1
    done <"$WORK/seals"
}

step_links() {
    "$PY" "$REF/ledger_ref.py" "$P" "$WORK/links" || return 1
    [ "$(cat "$WORK/links")" = "ok $(q 'SELECT count(*) FROM ledger')" ]
}

step_heads() {
    KEYN=$(m airframe.key)
    [ "$(q "SELECT seq || ' ' || link FROM ledger WHERE chain = $KEYN ORDER BY seq DESC LIMIT 1")" = \
      "$(m chain.airframe.seq) $(m chain.airframe.link)" ] &&
    [ "$(q "SELECT seq || ' ' || link FROM ledger WHERE chain IS NULL ORDER BY seq DESC LIMIT 1")" = \
      "$(m chain.store.seq) $(m chain.store.link)" ] &&
    [ "$(q "SELECT count(*) FROM ledger WHERE chain IS NOT NULL AND chain <> $KEYN")" = 0 ]
}

step_counts() {
    q "SELECT substr(name, 6) || ' ' || value FROM package_manifest WHERE name LIKE 'rows.%'" \
        >"$WORK/counts" || return 1
    [ "$(wc -l <"$WORK/counts")" -eq "$(q "SELECT count(*) FROM sqlite_master WHERE type = 'table'
        AND name NOT LIKE 'sqlite_%' AND name <> 'package_manifest'")" ] || return 1
    while read -r table n; do
        [ "$(q "SELECT count(*) FROM \"$table\"")" = "$n" ] || return 1
    done <"$WORK/counts"
}

step_maps() {
    [ "$(q "SELECT 'map ' || id || ' ' || sha256 FROM map ORDER BY id" | sha256sum | cut -c1-64)" = \
      "$(m maps.sha256)" ] || return 1
    # each map's data: zlib-compressed float32; its SHA-256 is the sha256 column
    "$PY" - "$P" 2>/dev/null <<'PY'
import hashlib, sqlite3, sys, zlib
for data, sha in sqlite3.connect(sys.argv[1]).execute("SELECT data, sha256 FROM map"):
    assert hashlib.sha256(zlib.decompress(data)).hexdigest() == sha
PY
}

STEPS="file fingerprint manifest seals links heads counts maps"
receiver_check() {
    P=$1
    for s in $STEPS; do
        "step_$s" || { echo "$s"; return; }
    done
    echo sound
}

P="$PKG"
[ "$(receiver_check "$PKG")" = sound ] || fail "the package plyledger wrote fails the receiver's step $(receiver_check "$PKG")"
[ "$(q 'SELECT count(*) FROM disposition')" = 1 ] || fail "the disposition did not travel"
[ "$(q 'SELECT count(*) FROM person_key')" = 1 ] || fail "the signer's key did not travel"
[ "$(q "SELECT count(*) FROM airframe WHERE serial = 'TST-0001'")" = 0 ] || fail "the other airframe travelled"

# ---- altered packages: the step that must catch each -------------------------------
T="$WORK/altered.plpkg"
# altered NAME STEP SQL: SQL run on a copy (triggers on the tables it names
# dropped first and put back as they were); the receiver's check must stop at STEP
altered() {
    cp "$PKG" "$T"
    sel="FROM sqlite_master WHERE type = 'trigger' AND (name LIKE '%_no_update' OR name LIKE '%_no_delete')"
    defs=$(sqlite3 "$T" "SELECT group_concat(sql, ';') $sel")
    drops=$(sqlite3 "$T" "SELECT group_concat('DROP TRIGGER ' || name, ';') $sel")
    sqlite3 "$T" "BEGIN; $drops; $3; $defs; COMMIT" || { fail "$1: the alteration did not apply"; return; }
    got=$(receiver_check "$T")
    [ "$got" = "$2" ] || fail "$1: the receiver's check stopped at '$got', expected '$2'"
    # and plyledger refuses it too
    $WRAP "$PLY_BIN" package check "$T" >/dev/null 2>"$WORK/err" && fail "$1: package check passed"
}
altered "manifest value" manifest \
    "UPDATE package_manifest SET value = '2030-01-01T00:00:00.000Z' WHERE name = 'exported_at'"
altered "seal replaced" seals \
    "UPDATE ledger_seal SET seal = (SELECT seal FROM ledger_seal ORDER BY ledger_id LIMIT 1)
     WHERE ledger_id = (SELECT max(ledger_id) FROM ledger_seal)"
altered "row value" links "UPDATE inspection SET inspector = 'someone else'"
altered "last link cut" heads \
    "DELETE FROM ledger_seal WHERE ledger_id = (SELECT max(id) FROM ledger);
     DELETE FROM disposition; DELETE FROM ledger WHERE id = (SELECT max(id) FROM ledger)"
altered "row added" counts "INSERT INTO store_info (name, value) VALUES ('note', 'added')"
altered "map data" maps \
    "UPDATE map SET data = (SELECT data FROM map ORDER BY id DESC LIMIT 1) WHERE id = (SELECT min(id) FROM map)"
GIVEN_SAVED=$GIVEN
GIVEN=00000000000000000000000000000000
[ "$(receiver_check "$PKG")" = fingerprint ] || fail "another sender's fingerprint was not told apart"
GIVEN=$GIVEN_SAVED

if [ "$FAILS" -ne 0 ]; then
    echo "$FAILS failures" >&2
    exit 1
fi
echo "the package passed every step a receiver without plyledger takes; 6 alterations caught"
