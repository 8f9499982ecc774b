#!/bin/sh
# run_cli_tests.sh - end-to-end tests of the plyledger command line.
#
# Usage: run_cli_tests.sh PLYLEDGER_BINARY TESTS_CLI_DIR
# Environment: PL_PYTHON (Debian's python3 with numpy and pypng), PL_WRAP
# (optional command prefix, e.g. valgrind), TMPDIR.
#
# Every bad input must give exit 1 (or 2 for a bad command line), exactly one
# line on stderr that names the file or record and the fault, and leave the
# store's content exactly as it was (compared by a full SQL dump).
set -u
PLY_BIN=$1
HERE=$2
PY=${PL_PYTHON:-/usr/bin/python3}
WRAP=${PL_WRAP:-}
WORK=$(mktemp -d "${TMPDIR:-/tmp}/plyledger-cli-XXXXXX")
trap 'rm -rf "$WORK"' EXIT
STORE="$WORK/fleet.plyledger"
FAILS=0
COUNT=0

ply() { $WRAP "$PLY_BIN" "$@"; }

fail() {
    FAILS=$((FAILS + 1))
    echo "FAIL: $*" >&2
}

# run NAME EXPECTED_EXIT command...   (stdout -> $WORK/out, stderr -> $WORK/err)
run() {
    name=$1; want=$2; shift 2
    COUNT=$((COUNT + 1))
    "$@" >"$WORK/out" 2>"$WORK/err"
    got=$?
    if [ "$got" -ne "$want" ]; then
        fail "$name: exit $got, expected $want"
        sed 's/^/    stderr: /' "$WORK/err" >&2
        sed 's/^/    stdout: /' "$WORK/out" | head -20 >&2
        return 1
    fi
    return 0
}

# expect_out NAME TEXT: stdout contains TEXT
expect_out() {
    grep -qF -- "$2" "$WORK/out" || { fail "$1: stdout lacks '$2'"; sed 's/^/    /' "$WORK/out" | head -30 >&2; }
}

# expect_one_line_err NAME TEXT...: stderr is one line containing every TEXT
expect_one_line_err() {
    name=$1; shift
    lines=$(grep -c '' "$WORK/err")
    [ "$lines" -eq 1 ] || { fail "$name: $lines lines on stderr, expected 1"; sed 's/^/    /' "$WORK/err" >&2; }
    for t in "$@"; do
        grep -qF -- "$t" "$WORK/err" || { fail "$name: stderr lacks '$t'"; sed 's/^/    /' "$WORK/err" >&2; }
    done
}

dump() { sqlite3 "$STORE" .dump 2>&1 | grep -v '^PRAGMA\|^BEGIN\|^COMMIT'; }

# bad NAME EXIT TEXT COMMAND...: a refused command leaves the store as it was
bad() {
    name=$1; want=$2; text=$3; shift 3
    dump >"$WORK/before.sql"
    if run "$name" "$want" "$@"; then
        if [ "$want" -eq 2 ]; then
            # misuse: the problem on the first line, then the short usage
            head -1 "$WORK/err" | grep -qF -- "$text" || { fail "$name: first stderr line lacks '$text'"; sed 's/^/    /' "$WORK/err" >&2; }
        else
            expect_one_line_err "$name" "$text"
        fi
    fi
    dump >"$WORK/after.sql"
    cmp -s "$WORK/before.sql" "$WORK/after.sql" || fail "$name: the store changed"
}

# ---- fixtures ---------------------------------------------------------------

cat >"$WORK/plan.csv" <<'CSV'
site,zone,description,frame,stringer,method,material,thickness_mm,diffusivity_mm2_s,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,width_px,height_px,pitch_mm
T01,253,"Window belt, left, frames 20-21",FR 20,STR 14L,flash-thermography,CFRP-QI-4,4.0,0.42,10250,-1850,2100,1,0,0,0,0,-1,40,30,0.5
T02,253,Keel beam splice,FR 22,STR 40,flash-thermography,CFRP-QI-4,4.0,0.42,10900,0,-300,1,0,0,0,1,0,40,30,0.5
T03,254,Door surround aft corner,FR 31,STR 12R,flash-thermography,CFRP-QI-6,6.0,0.42,14100,1900,1950,1,0,0,0,0,-1,0,0,0.5
CSV

# numpy writes the maps: a float32 40x30 map, a float64 one, a 2-channel one,
# and bad ones (int64 dtype, 4-D rank, wrong size).
"$PY" - "$WORK" <<'PY' || { echo "FAIL: numpy fixtures" >&2; exit 1; }
import sys, numpy as np
d = sys.argv[1]
rng = np.random.default_rng(7)
m = rng.normal(0.0, 0.05, (30, 40)).astype(np.float32)
m[10:16, 12:20] += 0.8
m[0, 0] = np.nan
np.save(d + "/t01_base.npy", m)
np.save(d + "/t01_f64.npy", (m.astype(np.float64) * 1.5))
np.save(d + "/t02_two.npy", np.stack([m, m * 2]).astype(np.float32))
np.save(d + "/bad_int64.npy", np.zeros((30, 40), dtype=np.int64))
np.save(d + "/bad_rank.npy", np.zeros((1, 2, 30, 40), dtype=np.float32))
np.save(d + "/bad_size.npy", np.zeros((31, 40), dtype=np.float32))
m.astype("<f4").tofile(d + "/t01_base.raw")
PY

# pypng writes an RGB PNG (not grayscale) and a good 16-bit grey one; a
# truncated PNG is a good one cut short.
"$PY" - "$WORK" <<'PY' || { echo "FAIL: png fixtures" >&2; exit 1; }
import sys, png
d = sys.argv[1]
rows = [[(x * 7 + y * 3) % 256 for x in range(40 * 3)] for y in range(30)]
with open(d + "/rgb.png", "wb") as f:
    png.Writer(40, 30, greyscale=False, bitdepth=8).write(f, rows)
grey = [[(x * 1000 + y * 13) % 65535 for x in range(40)] for y in range(30)]
with open(d + "/grey16.png", "wb") as f:
    png.Writer(40, 30, greyscale=True, bitdepth=16).write(f, grey)
data = open(d + "/grey16.png", "rb").read()
open(d + "/truncated.png", "wb").write(data[: len(data) // 2])
PY

printf 'this is not a database, just text\n' >"$WORK/not-a-store.plyledger"
sqlite3 "$WORK/foreign.db" "CREATE TABLE t(x); INSERT INTO t VALUES(1);"

TRACE="--procedure NDT-TEST-01 --procedure-rev A --equipment test-rig --calibration RS-T1 --inspector tester --level 2"

# ---- help and usage ---------------------------------------------------------

run "help" 0 ply --help && expect_out "help" "Commands:"
for c in create add-airframe set-operator import-plan record correct airframes sites \
         inspections history export-map summary quantities version help; do
    run "$c --help" 0 ply "$c" --help && expect_out "$c --help" "usage: plyledger"
done
run "version" 0 ply --version && expect_out "version" "plyledger "
run "unknown command" 2 ply frobnicate && expect_one_line_err "unknown command" "unknown command 'frobnicate'" "plyledger help"
run "unknown option" 2 ply summary --frob --store "$STORE"
grep -qF "unknown option '--frob'" "$WORK/err" || fail "unknown option: message"
run "no store" 2 env -u PLYLEDGER_STORE "$PLY_BIN" summary
grep -qF -- "--store" "$WORK/err" || fail "no store: message"

# ---- building a store ---------------------------------------------------------

run "create" 0 ply create "$STORE" && expect_out "create" "created store"
run "create again" 1 ply create "$STORE"
run "add airframe" 0 ply add-airframe --store "$STORE" --serial TST-0001 --type TX-1 \
    --manufactured 2015-01-15 --operator "Test Operator One" && expect_out "add airframe" "TST-0001"
run "add airframe 2" 0 ply add-airframe --store "$STORE" --serial TST-0002 --type TX-1
run "import plan" 0 ply import-plan --store "$STORE" --airframe TST-0001 "$WORK/plan.csv" \
    && expect_out "import plan" "added 3 sites"
run "import plan 2" 0 ply import-plan --store "$STORE" --airframe TST-0002 "$WORK/plan.csv"
run "set operator" 0 ply set-operator --store "$STORE" --serial TST-0001 --operator "Test Operator Two" --since 2019-06-01 \
    && expect_out "set operator" "Test Operator Two"

export PLYLEDGER_STORE="$STORE"
run "record baseline" 0 ply record --airframe TST-0001 --site T01 --kind baseline --date 2015-02-01 \
    --hours 0 --cycles 0 $TRACE --map "$WORK/t01_base.npy" --quantity temperature-contrast \
    && expect_out "record baseline" "recorded 1 inspection(s) with 1 map(s)"
run "record png" 0 ply record --airframe TST-0001 --site T01 --kind scheduled --date 2020-03-01 \
    --task "HC-1" --hours 9000 --cycles 6100 $TRACE --map "$WORK/grey16.png" --quantity phase --unit rad
run "record two channels" 0 ply record --airframe TST-0001 --site T02 --kind baseline --date 2015-02-01 \
    $TRACE --map "$WORK/t02_two.npy" --quantity temperature-contrast,amplitude --unit K,K --json
grep -q '"inspection"' "$WORK/out" || fail "record --json: no inspection id"

# A sidecar records two sites at once.
cat >"$WORK/check.json" <<JSON
{ "airframe": "TST-0002", "kind": "baseline", "date": "2015-03-10",
  "procedure": "NDT-TEST-01", "procedure_revision": "A", "equipment": "test-rig",
  "calibration": "RS-T1", "inspector": "tester", "inspector_level": "2",
  "parameters": { "note": "sidecar" },
  "sites": [
    { "site": "T01", "maps": [ { "file": "t01_f64.npy",
        "channels": [ { "quantity": "temperature-contrast", "unit": "K" } ] } ] },
    { "site": "T03", "maps": [ { "file": "t01_base.npy", "pitch_mm": 0.5,
        "channels": [ { "quantity": "depth" } ] } ] } ] }
JSON
run "record sidecar" 0 ply record --sidecar "$WORK/check.json" && expect_out "record sidecar" "recorded 2 inspection(s) with 2 map(s)"

# ---- listings -----------------------------------------------------------------------

run "airframes" 0 ply airframes && expect_out "airframes" "TST-0002"
expect_out "airframes" "Test Operator Two"
run "airframes --json" 0 ply airframes --json --type TX-1
"$PY" -c 'import json,sys; a=json.load(open(sys.argv[1])); assert [x["serial"] for x in a]==["TST-0001","TST-0002"], a' "$WORK/out" \
    || fail "airframes --json content"
run "sites filter" 0 ply sites --airframe TST-0001 --zone 254 && expect_out "sites filter" "T03"
grep -q "T01" "$WORK/out" && fail "sites filter: T01 should not match zone 254"
run "sites unknown airframe" 1 ply sites --airframe NOPE-9 && expect_one_line_err "sites unknown airframe" "NOPE-9"
run "inspections" 0 ply inspections --airframe TST-0001 --site T01 && expect_out "inspections" "2020-03-01"
run "inspections kind" 0 ply inspections --kind scheduled --json
"$PY" -c 'import json,sys; a=json.load(open(sys.argv[1])); assert len(a)==1 and a[0]["kind"]=="scheduled" and a[0]["cycles"]==6100, a' "$WORK/out" \
    || fail "inspections --kind --json content"
run "inspections dates" 0 ply inspections --from 2015-02-02 --to 2015-12-31 --json
"$PY" -c 'import json,sys; a=json.load(open(sys.argv[1])); assert {x["site"] for x in a}=={"T01","T03"} and all(x["airframe"]=="TST-0002" for x in a), a' "$WORK/out" \
    || fail "inspections --from/--to content"
run "history" 0 ply history --airframe TST-0001 --site T01 && expect_out "history" "baseline"
expect_out "history" "phase [rad]"
head -1 "$WORK/out" | grep -qF "site T01 on airframe TST-0001" || fail "history: header"
# oldest first
awk '/2015-02-01/{a=NR} /2020-03-01/{b=NR} END{exit !(a && b && a<b)}' "$WORK/out" || fail "history: order"
run "history --json" 0 ply history --airframe TST-0001 --site T01 --json
"$PY" -c '
import json,sys
h=json.load(open(sys.argv[1]))
ins=h["inspections"]
assert [i["date"] for i in ins]==["2015-02-01","2020-03-01"], ins
assert [(c["quantity"],c["unit"]) for c in ins[0]["maps"][0]["channels"]]==[("temperature-contrast","K")]
assert ins[0]["maps"][0]["width"]==40 and ins[0]["maps"][0]["height"]==30
assert ins[0]["maps"][0]["pitch_u_mm"]==0.5
assert h["site"]["map_frame"]["origin"]==[10250,-1850,2100]
' "$WORK/out" || fail "history --json content"
BASE_MAP=$("$PY" -c 'import json,sys; print(json.load(open(sys.argv[1]))["inspections"][0]["maps"][0]["map"])' "$WORK/out")
PNG_MAP=$("$PY" -c 'import json,sys; print(json.load(open(sys.argv[1]))["inspections"][1]["maps"][0]["map"])' "$WORK/out")
run "summary" 0 ply summary && expect_out "summary" "airframes    2"
expect_out "summary" "inspections  5 (baseline 4, scheduled 1"
run "summary --json" 0 ply summary --json
"$PY" -c 'import json,sys; s=json.load(open(sys.argv[1])); assert s["maps"]==5 and s["sites"]==6, s' "$WORK/out" \
    || fail "summary --json content"
run "quantities" 0 ply quantities && expect_out "quantities" "temperature-contrast"

# ---- export: numpy reads what plyledger writes (outside reference: numpy.load) ----

run "export npy" 0 ply export-map --map "$BASE_MAP" --output "$WORK/out.npy"
"$PY" - "$WORK" <<'PY' || fail "export npy: numpy.load disagrees with the recorded values"
import sys, numpy as np
d = sys.argv[1]
got = np.load(d + "/out.npy")
want = np.fromfile(d + "/t01_base.raw", dtype="<f4").reshape(30, 40)
assert got.dtype == np.float32 and got.shape == (30, 40), (got.dtype, got.shape)
assert np.array_equal(np.isnan(got), np.isnan(want))
assert np.array_equal(got[~np.isnan(got)], want[~np.isnan(want)])
PY
run "export png" 0 ply export-map --map "$PNG_MAP" --output "$WORK/out16.png"
"$PY" - "$WORK" <<'PY' || fail "export png: pypng reads different codes"
import sys, png
d = sys.argv[1]
w, h, rows, info = png.Reader(filename=d + "/out16.png").read()
got = [list(r) for r in rows]
assert (w, h, info["bitdepth"], info["greyscale"]) == (40, 30, 16, True), info
want = [[(x * 1000 + y * 13) % 65535 for x in range(40)] for y in range(30)]
# values were imported as raw codes (scale 1, offset 0); re-export quantises
# min..max onto 0..65534, so compare after undoing the affine map
lo = min(min(r) for r in want); hi = max(max(r) for r in want)
for y in range(h):
    for x in range(w):
        v = lo + (hi - lo) * got[y][x] / 65534.0
        assert abs(v - want[y][x]) <= (hi - lo) / 65534.0, (x, y, v, want[y][x])
PY
run "export render" 0 ply export-map --map "$BASE_MAP" --format render --output "$WORK/render.png"
"$PY" -c 'import png,sys; w,h,_,i=png.Reader(filename=sys.argv[1]).read(); assert i["bitdepth"]==8 and not i["greyscale"] and w>40 and h>30, (w,h,i)' "$WORK/render.png" \
    || fail "export render: not an RGB PNG larger than the map"
run "export bad channel" 1 ply export-map --map "$BASE_MAP" --channel 3 --output "$WORK/x.png"
run "export no map" 1 ply export-map --map 9999 --output "$WORK/x.npy"
run "export bad format" 2 ply export-map --map "$BASE_MAP" --output "$WORK/x.tif"
run "export zoom beyond the library's limit" 2 ply export-map --map "$BASE_MAP" --format render --zoom 65 --output "$WORK/x.png"

# ---- corrections -------------------------------------------------------------------

run "correct inspection" 0 ply correct --inspection 1 --hours 0.5 --reason "hours misread from the log"
run "correct inspection json" 0 ply inspections --airframe TST-0001 --site T01 --kind baseline --json
"$PY" -c 'import json,sys; a=json.load(open(sys.argv[1])); assert a[0]["hours"]==0.5 and a[0]["inspection"]==1 and a[0]["version_id"]!=1, a' "$WORK/out" \
    || fail "correct inspection: listing does not show the corrected version"
bad "correct without reason" 2 "--reason" ply correct --inspection 1 --hours 3
run "correct site" 0 ply correct --airframe TST-0001 --site T02 --description "Keel beam splice, corrected" --reason "plan typo"
run "summary corrections" 0 ply summary --json
"$PY" -c 'import json,sys; s=json.load(open(sys.argv[1])); assert s["corrections"]==2, s' "$WORK/out" || fail "summary counts corrections"

# ---- bad inputs: one line, names the file, store unchanged ---------------------------

rec() { ply record --airframe TST-0001 --site T01 --kind scheduled --date 2021-01-01 $TRACE "$@"; }
bad "truncated png" 1 "truncated.png" rec --map "$WORK/truncated.png" --quantity phase --unit rad
bad "rgb png" 1 "rgb.png" rec --map "$WORK/rgb.png" --quantity phase --unit rad
bad "npy int64" 1 "bad_int64.npy" rec --map "$WORK/bad_int64.npy" --quantity depth
bad "npy rank" 1 "bad_rank.npy" rec --map "$WORK/bad_rank.npy" --quantity depth
bad "map size differs" 1 "bad_size.npy" rec --map "$WORK/bad_size.npy" --quantity depth
bad "missing map file" 1 "no-such.npy" rec --map "$WORK/no-such.npy" --quantity depth
bad "good then bad map" 1 "bad_int64.npy" rec --map "$WORK/t01_base.npy" --quantity depth --map "$WORK/bad_int64.npy"
bad "unknown airframe" 1 "NOPE-1" ply record --airframe NOPE-1 --site T01 --kind scheduled --date 2021-01-01 $TRACE --map "$WORK/t01_base.npy" --quantity depth
bad "unknown site" 1 "T99" ply record --airframe TST-0001 --site T99 --kind scheduled --date 2021-01-01 $TRACE --map "$WORK/t01_base.npy" --quantity depth
bad "second baseline" 1 "baseline" ply record --airframe TST-0001 --site T01 --kind baseline --date 2021-01-01 $TRACE --map "$WORK/t01_base.npy" --quantity depth
bad "bad date" 1 "2021-02-30" ply record --airframe TST-0001 --site T01 --kind scheduled --date 2021-02-30 $TRACE --map "$WORK/t01_base.npy" --quantity depth
bad "bad kind" 1 "routine" ply record --airframe TST-0001 --site T01 --kind routine --date 2021-01-01 $TRACE --map "$WORK/t01_base.npy" --quantity depth
bad "missing traceability" 1 "inspector" ply record --airframe TST-0001 --site T01 --kind scheduled --date 2021-01-01 --procedure P --procedure-rev A --equipment E --calibration C --level 2 --map "$WORK/t01_base.npy" --quantity depth
bad "bad quantity unit" 1 "depth" rec --map "$WORK/t01_base.npy" --quantity depth --unit K
bad "npy without quantity" 1 "t01_base.npy" rec --map "$WORK/t01_base.npy"
bad "negative pitch option" 2 "--pitch" rec --map "$WORK/t01_base.npy" --quantity depth --pitch -1
bad "nan pitch option" 2 "--pitch" rec --map "$WORK/t01_base.npy" --quantity depth --pitch nan
bad "pitch differs from site" 1 "pitch" rec --map "$WORK/t01_base.npy" --quantity depth --pitch 0.7
bad "duplicate serial" 1 "TST-0001" ply add-airframe --serial TST-0001 --type TX-1

printf 'site,zone,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z\nS1,1,flash-thermography,0,0,0,1,0,0,0,1,0\n' >"$WORK/plan_missing.csv"
bad "plan missing column" 1 "pitch_mm" ply import-plan --airframe TST-0002 "$WORK/plan_missing.csv"
grep -qF "plan_missing.csv" "$WORK/err" || fail "plan missing column: file not named"
{ head -1 "$WORK/plan.csv"; sed -n 2p "$WORK/plan.csv" | sed 's/^T01/N01/'; sed -n 2p "$WORK/plan.csv" | sed 's/^T01/N01/'; } >"$WORK/plan_dup.csv"
bad "plan duplicate code" 1 "N01" ply import-plan --airframe TST-0002 "$WORK/plan_dup.csv"
grep -qF "plan_dup.csv" "$WORK/err" || fail "plan duplicate code: file not named"
{ head -1 "$WORK/plan.csv"; sed -n 2p "$WORK/plan.csv" | sed 's/^T01/N02/; s/,0\.5$/,nan/'; } >"$WORK/plan_nan.csv"
bad "plan nan pitch" 1 "plan_nan.csv" ply import-plan --airframe TST-0002 "$WORK/plan_nan.csv"
{ head -1 "$WORK/plan.csv"; sed -n 2p "$WORK/plan.csv" | sed 's/^T01/N03/; s/,0\.5$/,-0.5/'; } >"$WORK/plan_neg.csv"
bad "plan negative pitch" 1 "plan_neg.csv" ply import-plan --airframe TST-0002 "$WORK/plan_neg.csv"
{ head -1 "$WORK/plan.csv"; sed -n 2p "$WORK/plan.csv" | sed 's/^T01/N04/'; sed -n 2p "$WORK/plan.csv"; } >"$WORK/plan_exists.csv"
bad "plan site already on airframe" 1 "T01" ply import-plan --airframe TST-0002 "$WORK/plan_exists.csv"

cat >"$WORK/bad_sidecar.json" <<'JSON'
{ "airframe": "TST-0002", "kind": "scheduled", "date": "2021-01-01", "inspecter": "typo",
  "sites": [ { "site": "T01" } ] }
JSON
bad "sidecar unknown key" 1 "inspecter" ply record --sidecar "$WORK/bad_sidecar.json"
printf '{ "airframe": ' >"$WORK/broken.json"
bad "sidecar not json" 1 "broken.json" ply record --sidecar "$WORK/broken.json"

# ---- simulate and reduce ------------------------------------------------------

cat >"$WORK/scene.json" <<'JSON'
{ "format": "plyledger-scene-1", "seed": 5,
  "laminate": { "thickness_mm": 3.0, "density_kg_m3": 1560, "specific_heat_j_kgk": 1200,
    "conductivity_along_w_mk": 2.5, "conductivity_across_w_mk": 2.0, "conductivity_through_w_mk": 0.75 },
  "flash": { "energy_j_m2": 8000 },
  "camera": { "width": 40, "height": 30, "pitch_mm": 0.5, "frame_rate_hz": 50, "frame_count": 200,
    "netd_k": 0.02, "storage": "uint16", "gain_k": 0.004, "offset_k": 273.15, "saturation_count": 16383 },
  "defects": [ { "kind": "delamination", "depth_mm": 0.8, "resistance_m2k_w": 0.1,
    "outline": { "shape": "circle", "centre_mm": [10, 7.5], "diameter_mm": 8 } } ] }
JSON
run "simulate" 0 ply simulate "$WORK/scene.json" --output "$WORK/seq.json" \
    && expect_out "simulate" "200 frames"
[ -f "$WORK/seq-truth.json" ] || fail "simulate: no ground truth written"
"$PY" -c 'import json,sys; t=json.load(open(sys.argv[1])); d=t["defects"][0]; assert abs(d["area_mm2"]-3.14159265*16)<1e-6, d["area_mm2"]' \
    "$WORK/seq-truth.json" || fail "simulate: truth area of an 8 mm circle"
run "reduce to npy" 0 ply reduce "$WORK/seq.json" --output "$WORK/reduced.npy" --diffusivity 0.4006 --json
"$PY" - "$WORK" <<'PY' || fail "reduce: numpy reads a wrong map"
import sys, json, numpy as np
d = sys.argv[1]
info = json.load(open(d + "/out"))
m = np.load(d + "/reduced.npy")
names = [(c["quantity"], c["label"]) for c in info["channels"]]
assert m.shape == (len(names), 30, 40), m.shape
depth = m[names.index(("depth", "peak d2"))]
# the simulated flat-bottom delamination lies 0.8 mm deep under pixel (20, 15)
assert abs(float(np.nanmedian(depth[13:18, 18:23])) - 0.8) < 0.12, depth[13:18, 18:23]
PY
run "reduce and record" 0 ply reduce "$WORK/seq.json" --at 0.3 --airframe TST-0001 --site T03 \
    --kind baseline --date 2015-05-05 $TRACE && expect_out "reduce and record" "recorded inspection"
run "reduce history" 0 ply history --airframe TST-0001 --site T03 --json
"$PY" -c '
import json,sys
h=json.load(open(sys.argv[1]))
i=h["inspections"][-1]
assert i["parameters"]["software"].startswith("plyledger ") and i["parameters"]["acquisition"]["simulation"], i["parameters"]
m=i["maps"][0]
assert m["made_by"]=="reduce" and m["pitch_u_mm"]==0.5, m
assert ("depth","peak d2") in [(c["quantity"],c["label"]) for c in m["channels"]]
' "$WORK/out" || fail "reduce and record: the recorded inspection lacks its reduction"

cp "$WORK/seq.json" "$WORK/seq_times.json"
"$PY" - "$WORK/seq_times.json" <<'PY'
import json, sys
p = sys.argv[1]; m = json.load(open(p))
del m["frame_rate_hz"]
m["frame_times_s"] = [0.02 * i for i in range(200)]
m["frame_times_s"][50] = m["frame_times_s"][49]
json.dump(m, open(p, "w"))
PY
bad "sequence times not increasing" 1 "seq_times.json" ply reduce "$WORK/seq_times.json" --airframe TST-0001 --site T03 --kind scheduled --date 2016-01-01 $TRACE
cp "$WORK/seq.npy" "$WORK/short.npy"
"$PY" -c 'import os,sys; os.truncate(sys.argv[1], os.path.getsize(sys.argv[1]) - 1000)' "$WORK/short.npy"
sed 's/"seq.npy"/"short.npy"/' "$WORK/seq.json" >"$WORK/seq_short.json"
bad "truncated sequence" 1 "short.npy" ply reduce "$WORK/seq_short.json" --airframe TST-0001 --site T03 --kind scheduled --date 2016-01-01 $TRACE
bad "reduce unknown site" 1 "T77" ply reduce "$WORK/seq.json" --airframe TST-0001 --site T77 --kind scheduled --date 2016-01-01 $TRACE
"$PY" - "$WORK/seq.json" "$WORK/seq_pitch.json" <<'PY'
import json, sys
m = json.load(open(sys.argv[1])); m["pitch_mm"] = [1.0, 1.0]
json.dump(m, open(sys.argv[2], "w"))
PY
bad "reduce pitch differs from site" 1 "pitch" ply reduce "$WORK/seq_pitch.json" --airframe TST-0001 --site T02 --kind scheduled --date 2016-01-01 $TRACE
sed 's/"seed": 5,/"seed": 5, "colour": 1,/' "$WORK/scene.json" >"$WORK/scene_bad.json"
bad "scene unknown key" 1 "scene_bad.json" ply simulate "$WORK/scene_bad.json" --output "$WORK/x.json"

# ---- register ---------------------------------------------------------------------

# A site of any size on TST-0002, as the sample fleet simulates one; a
# baseline and a reinspection whose robot stood 1.5 mm, -1.0 mm and 0.6
# degrees off (the simulator's truth).
printf 'site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,diffusivity_mm2_s\nT04,flash-thermography,9000,-1500,2000,1,0,0,0,0,-1,1.0,0.4006\n' >"$WORK/plan_t04.csv"
run "plan T04" 0 ply import-plan --airframe TST-0002 "$WORK/plan_t04.csv"
for which in base cur; do
    if [ "$which" = base ]; then err='[0, 0]'; rot=0; seed=11; else err='[1.5, -1.0]'; rot=0.6; seed=12; fi
    cat >"$WORK/scene_$which.json" <<JSON
{ "format": "plyledger-scene-1", "seed": $seed,
  "laminate": { "thickness_mm": 3.0, "density_kg_m3": 1560, "specific_heat_j_kgk": 1200,
    "conductivity_along_w_mk": 2.6, "conductivity_across_w_mk": 1.9, "conductivity_through_w_mk": 0.75 },
  "flash": { "energy_j_m2": 7500 },
  "camera": { "width": 96, "height": 72, "pitch_mm": 1.0, "frame_rate_hz": 50, "frame_count": 400,
    "netd_k": 0.02, "storage": "float32" },
  "grid": { "pitch_mm": 0.5, "layers": 24 },
  "placement_error": { "shift_mm": $err, "rotation_deg": $rot },
  "substructure": [
    { "kind": "flange", "outline": { "shape": "rectangle", "centre_mm": [48, 25], "size_mm": [160, 26] }, "thickness_mm": 2.5 },
    { "kind": "flange", "outline": { "shape": "rectangle", "centre_mm": [31, 36], "size_mm": [14, 130] }, "thickness_mm": 2.0 } ],
  "defects": [ { "kind": "delamination", "depth_mm": 1.0,
    "outline": { "shape": "ellipse", "centre_mm": [70, 50], "axes_mm": [12, 8], "angle_deg": 0 } },
    { "kind": "impact", "centre_mm": [60, 15], "top_depth_mm": 0.5, "bottom_depth_mm": 2.0,
      "top_diameter_mm": 5, "bottom_diameter_mm": 14, "layers": 5 } ] }
JSON
    run "simulate $which" 0 ply simulate "$WORK/scene_$which.json" --output "$WORK/seq_$which.json" --no-truth -q
done
run "reduce base" 0 ply reduce "$WORK/seq_base.json" --airframe TST-0002 --site T04 --kind baseline --date 2015-06-01 $TRACE -q
run "reduce cur" 0 ply reduce "$WORK/seq_cur.json" --airframe TST-0002 --site T04 --kind scheduled --date 2021-06-01 $TRACE -q
run "register" 0 ply register --airframe TST-0002 --site T04 --aligned "$WORK/aligned.npy" \
    --view "$WORK/view.png" --json
"$PY" - "$WORK" <<'PY' || fail "register: transform or outputs wrong"
import sys, json, numpy as np, png
d = sys.argv[1]
r = json.load(open(d + "/out"))
assert r["status"] == "aligned", r
t = r["transform"]
# truth: 1.5 mm, -1.0 mm at 1 mm per pixel, 0.6 degrees (the simulator's scene);
# the unit tests hold the method to 0.1 px and 0.05 degrees, this checks the
# whole path from the store with the same signs
assert abs(t["shift_col_px"] - 1.5) < 0.1 and abs(t["shift_row_px"] + 1.0) < 0.1, t
assert abs(t["rotation_deg"] - 0.6) < 0.05, t
assert abs(t["shift_u_mm"] - 1.5) < 0.1 and abs(t["shift_v_mm"] + 1.0) < 0.1, t
assert r["quality"]["ncc"] > 0.5 and 0.8 < r["quality"]["overlap_fraction"] <= 1.0, r
a = np.load(d + "/aligned.npy")
assert a.ndim == 3 and a.shape[1:] == (72, 96), a.shape
w, h, _, info = png.Reader(filename=d + "/view.png").read()
assert w > 96 and not info["greyscale"]
PY
run "register history" 0 ply history --airframe TST-0002 --site T04 && expect_out "register history" "(aligned): shift"
# history and register --json describe a registration in one shape
ply register --airframe TST-0002 --site T04 --no-rotation --json >"$WORK/register.json" || fail "register --json again"
run "register history json" 0 ply history --airframe TST-0002 --site T04 --json
"$PY" - "$WORK/register.json" "$WORK/out" <<'PY' || fail "register --json and history --json differ for one registration"
import json, sys
r = json.load(open(sys.argv[1]))
h = json.load(open(sys.argv[2]))
g = [x for x in h["inspections"][-1]["maps"][0]["registrations"] if x["registration"] == r["registration"]][0]
for k in ("caution", "airframe", "site", "baseline_inspection", "current_inspection", "simulated", "comparison_not_done", "aligned", "view"):
    del r[k]
assert r == g, (r, g)
PY
# A refusal is an outcome, recorded with the comparison it stops: exit 1,
# one line saying why, and the record shows both.
run "register refused" 1 ply register --airframe TST-0002 --site T04 --min-ncc 0.9999 \
    && expect_one_line_err "register refused" "refused" "correlation"
run "register refused summary" 0 ply summary --json
"$PY" -c 'import json,sys; s=json.load(open(sys.argv[1])); assert s["registrations"]==3 and s["comparisons"]==1, s' "$WORK/out" \
    || fail "register refused: the refusal and the comparison not done must be recorded"
run "register manual" 0 ply register --airframe TST-0002 --site T04 --manual 1.5,-1,0.6 \
    --by "A. Engineer" --why "checked against the stringer edges" --json
"$PY" -c 'import json,sys; r=json.load(open(sys.argv[1])); assert r["status"]=="manual" and r["transform"]["shift_col_px"]==1.5 and r["quality"]["ncc"]>0.5, r' "$WORK/out" \
    || fail "register manual: not recorded as given"
bad "register manual without who" 2 "--by" ply register --airframe TST-0002 --site T04 --manual 3,-2,0.6
bad "register no later inspection" 1 "no inspection after its baseline" ply register --airframe TST-0002 --site T01
bad "register unknown site" 1 "T99" ply register --airframe TST-0002 --site T99
bad "register upsample beyond the library's limit" 2 "--upsample" ply register --airframe TST-0002 --site T04 --upsample 1001

# ---- outputs never land on the store ---------------------------------------------
# Every option that writes a file, pointed at the store or at the files SQLite
# keeps beside it (which exist only while the store is open, so they are
# refused by folder and name as well as by inode): exit 1 with one line
# saying it is the store, the store unchanged and still readable. A failed
# output records nothing (the files are written before the transaction
# commits) and leaves no temporary file.

no_partials() {
    if ls -A "$WORK" | grep -q '\.partial$'; then
        fail "$1: a temporary file was left: $(ls -A "$WORK" | grep '\.partial$' | tr '\n' ' ')"
        rm -f "$WORK"/.*.partial
    fi
}

# not_store NAME WHAT COMMAND...: refused as the store's file WHAT
not_store() {
    name=$1; what=$2; shift 2
    bad "$name" 1 "the store" "$@"
    grep -qF -- "$what" "$WORK/err" || fail "$name: message does not say '$what'"
    run "$name: store still opens" 0 ply summary --json
    no_partials "$name"
}

ln "$STORE" "$WORK/store-hardlink.npy"
ln -s "$STORE" "$WORK/store-symlink.npy"
REG="ply register --airframe TST-0002 --site T04"
REC="--airframe TST-0001 --site T03 --kind scheduled --date 2016-01-01 $TRACE"
for target in "$STORE" "$STORE-wal" "$STORE-shm" "$STORE-journal" "$WORK/store-hardlink.npy" \
              "$WORK/store-symlink.npy"; do
    case $target in
    *-wal) what="-wal" ;; *-shm) what="-shm" ;; *-journal) what="-journal" ;; *) what="itself" ;;
    esac
    t=$(basename "$target")
    not_store "export npy onto $t" "$what" ply export-map --map "$BASE_MAP" --format npy --output "$target"
    not_store "export png onto $t" "$what" ply export-map --map "$BASE_MAP" --format png --output "$target"
    not_store "export render onto $t" "$what" ply export-map --map "$BASE_MAP" --format render --output "$target"
    not_store "register --aligned onto $t" "$what" $REG --aligned "$target"
    not_store "register --view onto $t" "$what" $REG --view "$target"
    not_store "register both, view onto $t" "$what" $REG --aligned "$WORK/ok-aligned.npy" --view "$target"
    [ -e "$WORK/ok-aligned.npy" ] && fail "register both, view onto $t: the other output was written"
    not_store "simulate --output onto $t" "$what" ply simulate "$WORK/scene.json" --output "$target"
    not_store "simulate --truth onto $t" "$what" ply simulate "$WORK/scene.json" --output "$WORK/ok-seq.json" --truth "$target"
    not_store "reduce --output onto $t" "$what" ply reduce "$WORK/seq.json" --output "$target"
    not_store "reduce and record, --output onto $t" "$what" ply reduce "$WORK/seq.json" --output "$target" $REC
done
[ -e "$WORK/ok-seq.json" ] && fail "simulate onto the store: a sequence was written"
# the default ground truth, and the data a manifest puts beside it
ln "$STORE" "$WORK/side-truth.json"
not_store "simulate default truth onto the store" "itself" ply simulate "$WORK/scene.json" --output "$WORK/side.json"
rm -f "$WORK/side-truth.json"
ln "$STORE" "$WORK/side.npy"
not_store "simulate data onto the store" "itself" ply simulate "$WORK/scene.json" --output "$WORK/side.json" --no-truth
not_store "simulate data onto a store given by --store" "itself" ply simulate "$WORK/scene.json" \
    --store "$WORK/side.npy" --output "$WORK/side.json" --no-truth
rm -f "$WORK/side.npy" "$WORK/store-hardlink.npy" "$WORK/store-symlink.npy"
[ -e "$WORK/side.json" ] && fail "simulate data onto the store: a manifest was written"
# the same folder by another name
mkdir "$WORK/sub"
not_store "export through another name of the folder" "-wal" ply export-map --map "$BASE_MAP" \
    --format npy --output "$WORK/sub/../$(basename "$STORE")-wal"
rmdir "$WORK/sub"

# An output that cannot be written fails the command before anything is
# recorded.
bad "register --aligned in no folder" 1 "/no/such/dir/x.npy" $REG --aligned /no/such/dir/x.npy
bad "register --view in no folder" 1 "/no/such/dir/x.png" $REG --view /no/such/dir/x.png
bad "register --view onto a folder" 1 "folder" $REG --aligned "$WORK/ok-aligned.npy" --view "$WORK"
[ -e "$WORK/ok-aligned.npy" ] && fail "register --view onto a folder: the other output was written"
bad "reduce and record, --output in no folder" 1 "/no/such/dir/x.npy" ply reduce "$WORK/seq.json" \
    --output /no/such/dir/x.npy $REC
bad "simulate --output in no folder" 1 "/no/such/dir" ply simulate "$WORK/scene.json" --output /no/such/dir/x.json
bad "export into no folder" 1 "/no/such/dir/x.npy" ply export-map --map "$BASE_MAP" --output /no/such/dir/x.npy
no_partials "outputs that cannot be written"
# ... and one that can is replaced whole, keeping nothing of the old file
printf 'old content that is longer than nothing' >"$WORK/again.npy"
run "export replaces a file" 0 ply export-map --map "$BASE_MAP" --output "$WORK/again.npy"
"$PY" -c 'import numpy as np,sys; a=np.load(sys.argv[1]); assert a.shape==(30,40), a.shape' "$WORK/again.npy" \
    || fail "export replaces a file: numpy cannot read it"
no_partials "export replaces a file"

# Stores that are not plyledger stores, or newer ones.
run "text file as store" 1 ply summary --store "$WORK/not-a-store.plyledger" \
    && expect_one_line_err "text file as store" "not-a-store.plyledger"
run "foreign sqlite as store" 1 ply summary --store "$WORK/foreign.db" \
    && expect_one_line_err "foreign sqlite as store" "foreign.db"
sqlite3 "$WORK/foreign.db" "SELECT count(*) FROM t" >/dev/null || fail "foreign.db was damaged"
[ "$(sqlite3 "$WORK/foreign.db" 'PRAGMA user_version')" = 0 ] || fail "foreign.db was migrated"
cp "$STORE" "$WORK/newer.plyledger"
sqlite3 "$WORK/newer.plyledger" "PRAGMA user_version = 99"
run "newer store" 1 ply summary --store "$WORK/newer.plyledger" \
    && expect_one_line_err "newer store" "newer.plyledger" "newer"
run "missing store" 1 ply summary --store "$WORK/nope.plyledger" && expect_one_line_err "missing store" "nope.plyledger"
[ -e "$WORK/nope.plyledger" ] && fail "missing store: a file was created"

# The record itself refuses changes in place.
sqlite3 "$STORE" "UPDATE inspection SET inspector='x'" 2>"$WORK/err" && fail "UPDATE of an inspection was allowed"
grep -q "append-only" "$WORK/err" || fail "UPDATE refusal message"

sqlite3 "$STORE" "PRAGMA integrity_check" | grep -qx ok || fail "integrity_check"

echo "$COUNT commands run, $FAILS failure(s)"
[ "$FAILS" -eq 0 ]
