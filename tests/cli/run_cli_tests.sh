#!/bin/sh
# run_cli_tests.sh - end-to-end tests of the plyledger command line: a store
# built, listed, exported, corrected, reduced into and registered on, each
# output checked against numpy, pypng or the simulator's truth.
#
# Usage: run_cli_tests.sh PLYLEDGER_BINARY TESTS_CLI_DIR
# Environment: PL_PYTHON (Debian's python3 with numpy and pypng), PL_WRAP
# (optional command prefix, e.g. valgrind), PL_EVERY=N (wrap only every N-th
# run), TMPDIR.
#
# The refused inputs are cases of the corpus (corpus.tsv, run by
# run_corpus.sh), each against the same prepared store with its SQL dump
# compared before and after.
set -u
PLY_BIN=$1
HERE=$2
PY=${PL_PYTHON:-/usr/bin/python3}
WRAP=${PL_WRAP:-}
EVERY=${PL_EVERY:-1}
case "$EVERY" in ''|*[!0-9]*|0) echo "FAIL: PL_EVERY=$EVERY is not a whole number above 0" >&2; exit 1 ;; esac
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
# Under PL_WRAP (valgrind, about a second a command), --help and misuse (exit
# 2) run without it: they end in the command's argument parsing, and the
# sanitizer build runs them under LeakSanitizer. With PL_EVERY=N only every
# N-th run (the first included) is wrapped.
run() {
    name=$1; want=$2; shift 2
    COUNT=$((COUNT + 1))
    wrap=$WRAP
    case " $* " in *" --help "*) WRAP="" ;; esac
    [ "$want" -eq 2 ] && WRAP=""
    [ $(( (COUNT - 1) % EVERY )) -eq 0 ] || WRAP=""
    "$@" >"$WORK/out" 2>"$WORK/err"
    got=$?
    WRAP=$wrap
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

# ---- fixtures ---------------------------------------------------------------

"$HERE/make_fixtures.sh" "$WORK" || { echo "FAIL: fixtures" >&2; exit 1; }

TRACE="--procedure NDT-TEST-01 --procedure-rev A --equipment test-rig --calibration RS-T1 --inspector tester --level 2"

# ---- help and usage ---------------------------------------------------------

run "help" 0 ply --help && expect_out "help" "Commands:"
for c in create add-airframe set-operator import-plan record correct airframes sites \
         inspections history export-map summary quantities version help; do
    run "$c --help" 0 ply "$c" --help && expect_out "$c --help" "usage: plyledger"
done
run "version" 0 ply --version && expect_out "version" "plyledger "

# ---- building a store ---------------------------------------------------------

run "create" 0 ply create "$STORE" && expect_out "create" "created store"
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

# An output that can be written replaces the old file whole, keeping nothing
# of it and leaving no temporary file (the refused outputs: corpus.tsv).
printf 'old content that is longer than nothing' >"$WORK/again.npy"
run "export replaces a file" 0 ply export-map --map "$BASE_MAP" --output "$WORK/again.npy"
"$PY" -c 'import numpy as np,sys; a=np.load(sys.argv[1]); assert a.shape==(30,40), a.shape' "$WORK/again.npy" \
    || fail "export replaces a file: numpy cannot read it"
if ls -A "$WORK" | grep -q '\.partial$'; then
    fail "export replaces a file: a temporary file was left: $(ls -A "$WORK" | grep '\.partial$' | tr '\n' ' ')"
fi

# ---- corrections -------------------------------------------------------------------

run "correct inspection" 0 ply correct --inspection 1 --hours 0.5 --reason "hours misread from the log"
run "correct inspection json" 0 ply inspections --airframe TST-0001 --site T01 --kind baseline --json
"$PY" -c 'import json,sys; a=json.load(open(sys.argv[1])); assert a[0]["hours"]==0.5 and a[0]["inspection"]==1 and a[0]["version_id"]!=1, a' "$WORK/out" \
    || fail "correct inspection: listing does not show the corrected version"
run "correct site" 0 ply correct --airframe TST-0001 --site T02 --description "Keel beam splice, corrected" --reason "plan typo"
run "summary corrections" 0 ply summary --json
"$PY" -c 'import json,sys; s=json.load(open(sys.argv[1])); assert s["corrections"]==2, s' "$WORK/out" || fail "summary counts corrections"

# ---- simulated data, hours out of order, infinities as no data -------------------
# (issue 8 faults 4, 14 and 2: each option changes what is recorded and shown)

run "record simulated" 0 ply record --airframe TST-0001 --site T02 --kind scheduled --date 2016-04-01 \
    --hours 1000 --cycles 700 $TRACE --simulated --map "$WORK/t01_base.npy" --quantity temperature-contrast
run "inspections DATA column" 0 ply inspections --airframe TST-0001 --site T02
expect_out "inspections DATA column" "DATA"
grep "2016-04-01" "$WORK/out" | grep -qw simulated || fail "inspections: the simulated inspection is not shown as simulated"
grep "2015-02-01" "$WORK/out" | grep -qw simulated && fail "inspections: the real baseline is shown as simulated"
run "inspections simulated json" 0 ply inspections --airframe TST-0001 --site T02 --json
"$PY" -c 'import json,sys; a=json.load(open(sys.argv[1])); assert [x["simulated"] for x in a]==[False, True], a' "$WORK/out" \
    || fail "inspections --json: simulated flags wrong"
run "history simulated" 0 ply history --airframe TST-0001 --site T02 && expect_out "history simulated" "SIMULATED DATA"
expect_out "history simulated" "does not replace"
grep -c "SIMULATED DATA" "$WORK/out" | grep -qx 1 || fail "history: SIMULATED DATA on more than the simulated inspection"

run "hours go down without a reason" 1 ply record --airframe TST-0001 --site T02 --kind scheduled --date 2016-05-01 \
    --hours 900 --cycles 650 $TRACE --map "$WORK/t01_base.npy" --quantity temperature-contrast \
    && expect_one_line_err "hours go down without a reason" "hours" "--hours-reason"
run "hours go down with a reason" 0 ply record --airframe TST-0001 --site T02 --kind scheduled --date 2016-05-01 \
    --hours 900 --cycles 650 --hours-reason "log book re-read: 1000 FH was a typing slip" $TRACE \
    --map "$WORK/t01_base.npy" --quantity temperature-contrast
run "history hours reason" 0 ply history --airframe TST-0001 --site T02 \
    && expect_out "history hours reason" "log book re-read: 1000 FH was a typing slip"

"$PY" - "$WORK/t01_base.npy" "$WORK/t01_inf.npy" <<'PY'
import sys, numpy as np
m = np.load(sys.argv[1]).astype(np.float32)
m[3, 4] = np.inf; m[5, 6] = -np.inf
np.save(sys.argv[2], m)
PY
run "infinite refused" 1 ply record --airframe TST-0001 --site T02 --kind scheduled --date 2016-06-01 \
    --hours 1100 --cycles 720 $TRACE --map "$WORK/t01_inf.npy" --quantity temperature-contrast \
    && expect_one_line_err "infinite refused" "t01_inf.npy" "infinite"
run "infinite as no data" 0 ply record --airframe TST-0001 --site T02 --kind scheduled --date 2016-06-01 \
    --hours 1100 --cycles 720 $TRACE --infinite-as-no-data --map "$WORK/t01_inf.npy" --quantity temperature-contrast --json
MAPID=$("$PY" -c 'import json,sys; print(json.load(open(sys.argv[1]))[0]["maps"][0])' "$WORK/out") \
    || fail "infinite as no data: no map id in --json"
run "infinite as no data export" 0 ply export-map --map "$MAPID" --output "$WORK/inf_back.npy"
"$PY" - "$WORK/inf_back.npy" <<'PY' || fail "infinite as no data: the infinities are not recorded as no data"
import sys, numpy as np
m = np.load(sys.argv[1])
base = np.load(sys.argv[1].replace("inf_back", "t01_base"))
assert m.shape == base.shape, (m.shape, base.shape)
assert np.isnan(m[3, 4]) and np.isnan(m[5, 6]), (m[3, 4], m[5, 6])
assert np.isfinite(m).sum() == m.size - 2 - np.isnan(base).sum()
PY

# ---- simulate and reduce ------------------------------------------------------

# scene.json: make_fixtures.sh
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

# ---- register ---------------------------------------------------------------------

# A site of any size on TST-0002, as the sample fleet simulates one; a
# baseline and a reinspection whose robot stood 1.5 mm, -1.0 mm and 0.6
# degrees off (the simulator's truth). The simulation grid is the camera's
# (1 mm, 12 layers through the thickness) and the record 6 s long:
# registered, it lands within 0.005 px and 0.006 degrees of the truth, as
# on the finer grid of 0.5 mm and 24 layers over 8 s (0.006 px, 0.006
# degrees; measured; at 4 s the rotation is 0.1 degrees off), at an eighth
# of the simulation's cost (the cost that counts under valgrind).
printf 'site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,pitch_mm,diffusivity_mm2_s\nT04,flash-thermography,9000,-1500,2000,1,0,0,0,0,-1,1.0,0.4006\n' >"$WORK/plan_t04.csv"
run "plan T04" 0 ply import-plan --airframe TST-0002 "$WORK/plan_t04.csv"
for which in base cur; do
    if [ "$which" = base ]; then err='[0, 0]'; rot=0; seed=11; else err='[1.5, -1.0]'; rot=0.6; seed=12; fi
    cat >"$WORK/scene_$which.json" <<JSON
{ "format": "plyledger-scene-1", "seed": $seed,
  "laminate": { "thickness_mm": 3.0, "density_kg_m3": 1560, "specific_heat_j_kgk": 1200,
    "conductivity_along_w_mk": 2.6, "conductivity_across_w_mk": 1.9, "conductivity_through_w_mk": 0.75 },
  "flash": { "energy_j_m2": 7500 },
  "camera": { "width": 96, "height": 72, "pitch_mm": 1.0, "frame_rate_hz": 50, "frame_count": 300,
    "netd_k": 0.02, "storage": "float32" },
  "grid": { "pitch_mm": 1.0, "layers": 12 },
  "placement_error": { "shift_mm": $err, "rotation_deg": $rot },
  "substructure": [
    { "kind": "flange", "outline": { "shape": "rectangle", "centre_mm": [48, 25], "size_mm": [160, 26] }, "thickness_mm": 2.5 },
    { "kind": "flange", "outline": { "shape": "rectangle", "centre_mm": [31, 36], "size_mm": [14, 130] }, "thickness_mm": 2.0 } ],
  "defects": [ { "kind": "delamination", "depth_mm": 1.0,
    "outline": { "shape": "ellipse", "centre_mm": [70, 50], "axes_mm": [12, 8], "angle_deg": 0 } },
    { "kind": "impact", "centre_mm": [60, 15], "top_depth_mm": 0.5, "bottom_depth_mm": 2.0,
      "top_diameter_mm": 5, "bottom_diameter_mm": 14, "layers": 5 } ] }
JSON
    # the simulator ran under PL_WRAP above: these two only make the pair
    run "simulate $which" 0 "$PLY_BIN" simulate "$WORK/scene_$which.json" --output "$WORK/seq_$which.json" --no-truth -q
done
run "reduce base" 0 ply reduce "$WORK/seq_base.json" --airframe TST-0002 --site T04 --kind baseline --date 2015-06-01 $TRACE -q
run "reduce cur" 0 ply reduce "$WORK/seq_cur.json" --airframe TST-0002 --site T04 --kind scheduled --date 2021-06-01 --task HC-1 $TRACE -q
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

# Where a record is shown to support a decision, the caution stays (fault 15).
CAUTION="it does not replace them. Local regulations and the design holder's data govern."
run "register text" 0 ply register --airframe TST-0002 --site T04 && expect_out "register caution" "$CAUTION"
run "summary text" 0 ply summary && expect_out "summary caution" "$CAUTION"
run "history text" 0 ply history --airframe TST-0002 --site T04 && expect_out "history caution" "$CAUTION"
run "register json" 0 ply register --airframe TST-0002 --site T04 --json
"$PY" -c 'import json,sys; r=json.load(open(sys.argv[1])); assert "does not replace" in r["caution"], r' "$WORK/out" \
    || fail "register --json: no caution"
# ---- criteria sets ------------------------------------------------------------

SAMPLE_CRITERIA="$HERE/../../sample-fleet/criteria-example.json"
for c in "" import list show; do
    run "criteria $c --help" 0 ply criteria $c --help && expect_out "criteria $c --help" "usage: plyledger criteria"
done
run "criteria import" 0 ply criteria import "$SAMPLE_CRITERIA" \
    && expect_out "criteria import" "recorded criteria EXAMPLE-CR7-GROWTH revision A" \
    && expect_out "criteria import" "EXAMPLE VALUES, NOT APPROVED DATA"
run "criteria import again" 0 ply criteria import "$SAMPLE_CRITERIA" \
    && expect_out "criteria import again" "already recorded with this content" \
    && expect_out "criteria import again" "nothing changed"
run "criteria import again json" 0 ply criteria import --json "$SAMPLE_CRITERIA"
"$PY" -c 'import json,sys; r=json.load(open(sys.argv[1])); assert r["already_recorded"] is True and r["marking"]=="EXAMPLE VALUES, NOT APPROVED DATA", r' "$WORK/out" \
    || fail "criteria import --json: already_recorded and the marking"
# a new revision is a new row; the first stays
sed 's/"revision": "A"/"revision": "B"/; s/"area_growth_mm2": 40/"area_growth_mm2": 45/' "$SAMPLE_CRITERIA" >"$WORK/criteria-b.json"
run "criteria import revision B" 0 ply criteria import "$WORK/criteria-b.json" \
    && expect_out "criteria import revision B" "revision B (row 2, 8 rules"
run "criteria list" 0 ply criteria list && expect_out "criteria list" "EXAMPLE-CR7-GROWTH  B" \
    && expect_out "criteria list" "EXAMPLE VALUES, NOT APPROVED DATA"
run "criteria list json" 0 ply criteria list --json
"$PY" -c 'import json,sys; r=json.load(open(sys.argv[1])); assert [(x["revision"], x["criteria"], x["example_values"], x["rule_count"]) for x in r]==[("A",1,True,8),("B",2,True,8)], r' "$WORK/out" \
    || fail "criteria list --json"
run "criteria show latest" 0 ply criteria show EXAMPLE-CR7-GROWTH \
    && expect_out "criteria show latest" "criteria EXAMPLE-CR7-GROWTH revision B" \
    && expect_out "criteria show latest" "*** EXAMPLE VALUES, NOT APPROVED DATA ***" \
    && { grep -E "^[0-9]+ +door-corner-bonded-joint-fwd-pax +no-growth" "$WORK/out" >/dev/null \
         || fail "criteria show latest: the door-corner rule is not shown as no-growth"; }
# the set read back from the record is the file imported, field for field
run "criteria show json" 0 ply criteria show EXAMPLE-CR7-GROWTH --revision A --json
"$PY" - "$WORK/out" "$SAMPLE_CRITERIA" <<'PY' || fail "criteria show --json: the content is not the file imported"
import json, sys
r = json.load(open(sys.argv[1]))
f = json.load(open(sys.argv[2]))
assert r["content"] == f, (r["content"], f)
assert r["revision"] == "A" and r["marking"] == "EXAMPLE VALUES, NOT APPROVED DATA", r
PY
sqlite3 "$STORE" "UPDATE criteria SET revision='Z'" 2>"$WORK/err" && fail "UPDATE of a criteria set was allowed"
grep -q "append-only" "$WORK/err" || fail "criteria UPDATE refusal message"

# ---- compare ----------------------------------------------------------------------
# T04's two inspections simulate the same laminate, flanges, delamination and
# impact (different noise, the robot 1.5 mm and 0.6 deg off): both indications
# must be found again, stable, and nothing new.

run "compare --help" 0 ply compare --help && expect_out "compare --help" "Exit status"
run "compare without criteria" 2 ply compare --airframe TST-0002 --site T04
run "compare site and task" 2 ply compare --airframe TST-0002 --site T04 --task X --criteria EXAMPLE-CR7-GROWTH
run "compare unknown criteria" 1 ply compare --airframe TST-0002 --site T04 --criteria NO-SUCH-SET \
    && expect_one_line_err "compare unknown criteria" "NO-SUCH-SET"
run "compare unknown revision" 1 ply compare --airframe TST-0002 --site T04 --criteria EXAMPLE-CR7-GROWTH --revision Q \
    && expect_one_line_err "compare unknown revision" "Q"
run "compare quantity absent" 1 ply compare --airframe TST-0002 --site T04 --criteria EXAMPLE-CR7-GROWTH --quantity ultrasonic-amplitude \
    && expect_one_line_err "compare quantity absent" "T04"
run "compare summary before" 0 ply summary --json
BEFORE=$(cat "$WORK/out")
run "compare dry run" 0 ply compare --airframe TST-0002 --site T04 --criteria EXAMPLE-CR7-GROWTH --revision A --dry-run \
    && expect_out "compare dry run" "nothing recorded"
expect_out "compare dry run" "EXAMPLE VALUES, NOT APPROVED DATA"
expect_out "compare dry run" "does not replace"
ply summary --json >"$WORK/out" 2>/dev/null
[ "$(cat "$WORK/out")" = "$BEFORE" ] || fail "compare --dry-run changed the store"
mkdir -p "$WORK/pictures"
run "compare site" 0 ply compare --airframe TST-0002 --site T04 --criteria EXAMPLE-CR7-GROWTH --revision A \
    --pictures "$WORK/pictures" --json
"$PY" - "$WORK/out" "$WORK/pictures" <<'PY' || fail "compare site: result"
import json, sys, os
r = json.load(open(sys.argv[1]))
assert r["status"] == "done" and r["criteria"]["revision"] == "A", r["status"]
assert r["criteria"]["marking"] == "EXAMPLE VALUES, NOT APPROVED DATA"
assert "does not replace" in r["caution"]
kinds = [c["kind"] for c in r["changes"] if c["reportable"]]
# the delamination (12 x 8 mm ellipse, 75 mm^2) and the impact: found in both, not new
assert kinds.count("new") == 0 and r["counts"]["exceeding"] == 0, [(c["kind"], c["area_mm2"]) for c in r["changes"]]
assert kinds.count("stable") >= 1, kinds
for c in r["changes"]:
    if c["kind"] == "stable":
        assert c["area_margin_mm2"] >= 0 and not c["exceeds"], c
for n in ("reference", "aligned", "difference", "overlay"):
    p = os.path.join(sys.argv[2], "TST-0002-T04-%s.png" % n)
    assert open(p, "rb").read(8) == b"\x89PNG\r\n\x1a\n", p
PY
run "compare recorded" 0 ply summary --json
"$PY" -c 'import json,sys; s=json.load(open(sys.argv[1])); b=json.loads(sys.argv[2]); assert s["comparisons"]==b["comparisons"]+1 and s["registrations"]==b["registrations"]+1, (s, b)' "$WORK/out" "$BEFORE" \
    || fail "compare: the comparison and its registration are not recorded"
run "compare in history" 0 ply history --airframe TST-0002 --site T04 \
    && expect_out "compare in history" "criteria EXAMPLE-CR7-GROWTH rev A" \
    && expect_out "compare in history" "beyond their limits"
# TST-0002's other sites were not inspected under HC-1: status 4, and said
run "compare check" 4 ply compare --airframe TST-0002 --task HC-1 --criteria EXAMPLE-CR7-GROWTH --dry-run
expect_out "compare check" "summary of check HC-1 of TST-0002"
run "compare check unknown task" 1 ply compare --airframe TST-0002 --task NO-SUCH-CHECK --criteria EXAMPLE-CR7-GROWTH \
    && expect_one_line_err "compare check unknown task" "NO-SUCH-CHECK"

# ---- people, interpretation and signed dispositions -------------------------------
for c in new-key people interpret dispose dispositions seal; do
    run "$c --help" 0 ply $c --help && expect_out "$c --help" "usage: plyledger $c"
done
run "new-key" 0 ply new-key "$WORK/eng.key" && expect_out "new-key" "mode 0600"
[ "$(stat -c %a "$WORK/eng.key")" = 600 ] || fail "new-key: the key file is not mode 0600"
run "new-key over a file" 1 ply new-key "$WORK/eng.key"
run "new-key onto the store" 1 ply new-key "$STORE"
run "new-key inspector" 0 ply new-key "$WORK/insp.key"
run "people add engineer" 0 ply people add --handle n.example --name "N. Example" --role engineer --organisation "Test MRO"
run "people add again" 1 ply people add --handle N.EXAMPLE --name "Other" --role engineer
run "people add bad role" 1 ply people add --handle x.y --name "X" --role chief \
    && expect_one_line_err "people add bad role" "role"
run "people add inspector" 0 ply people add --handle t.inspector --name "T. Inspector" --role inspector
run "people wrong option" 2 ply people add --handle a.b --name B --role engineer --level 2
run "people add-key" 0 ply people add-key --handle n.example --key "$WORK/eng.key" --from 2016-01-01
run "people add-key inspector" 0 ply people add-key --handle t.inspector --key "$WORK/insp.key" --from 2016-01-01
cp "$WORK/insp.key" "$WORK/open.key" && chmod 644 "$WORK/open.key"
run "a key file others can read" 1 ply people add-key --handle t.inspector --key "$WORK/open.key" --from 2024-01-01 \
    && expect_one_line_err "a key file others can read" "chmod 600"
run "people qualify" 0 ply people qualify --handle t.inspector --method flash-thermography --level 2 --from 2016-01-01 --until 2019-12-31
run "people qualify free level" 1 ply people qualify --handle t.inspector --method flash-thermography --level senior --from 2016-01-01 --until 2019-12-31
run "people list" 0 ply people list && expect_out "people list" "flash-thermography level 2"
CMP=$(sqlite3 "$STORE" "SELECT max(id) FROM comparison WHERE status = 'done'")
run "dispose before interpreting" 1 ply dispose --comparison "$CMP" --change 1 --decision accept --by n.example --key "$WORK/eng.key" --date 2021-07-01 \
    && expect_one_line_err "dispose before interpreting" "not interpreted yet"
run "interpret" 0 ply interpret --comparison "$CMP" --change 1 --as relevant --by t.inspector --key "$WORK/insp.key" --date 2021-07-01 \
    && expect_out "interpret" "is relevant"
run "interpret unknown change" 1 ply interpret --comparison "$CMP" --change 99 --as relevant --by t.inspector --key "$WORK/insp.key" --date 2021-07-01
run "dispose with the wrong key" 1 ply dispose --comparison "$CMP" --change 1 --decision accept --by n.example --key "$WORK/insp.key" --date 2021-07-01 \
    && expect_one_line_err "dispose with the wrong key" "is not the key n.example holds"
run "dispose monitor without due" 1 ply dispose --comparison "$CMP" --change 1 --decision monitor --by n.example --key "$WORK/eng.key" --date 2021-07-01
run "dispose monitor" 0 ply dispose --comparison "$CMP" --change 1 --decision monitor --due-cycles 1500 --by n.example --key "$WORK/eng.key" --date 2021-07-02 \
    && expect_out "dispose monitor" "does not replace"
expect_out "dispose monitor" "1500 cycles"
DSP=$(sqlite3 "$STORE" "SELECT max(id) FROM disposition")
run "dispose supersedes" 0 ply dispose --comparison "$CMP" --change 1 --decision accept --supersedes "$DSP" --reason "reviewed against the repeatability" --by n.example --key "$WORK/eng.key" --date 2021-07-03 --json
"$PY" -c 'import json,sys; j=json.load(open(sys.argv[1])); assert "does not replace" in j["caution"] and j["disposition"]["decision"] == "accept", j' "$WORK/out" || fail "dispose --json"
run "dispositions" 0 ply dispositions --airframe TST-0002 && expect_out "dispositions" "SUPERSEDED"
expect_out "dispositions" "does not replace"
run "verify with signatures" 0 ply verify && expect_out "verify with signatures" "3 signatures checked"
# a lapsed qualification refuses the inspection
run "lapsed qualification" 1 ply record --airframe TST-0002 --site T04 --kind unscheduled --date 2022-05-05 \
    --procedure NDT-TEST-01 --procedure-rev A --equipment test-rig --calibration RS-T1 --inspector t.inspector --level 2 \
    --map "$WORK/t01_noisy.npy" --quantity temperature-contrast \
    && expect_one_line_err "lapsed qualification" "lapsed" "2019-12-31"

# ---- tracks, coverage and the disposition report -----------------------------------
for c in tracks coverage report; do
    run "$c --help" 0 ply $c --help && expect_out "$c --help" "usage: plyledger $c"
done
run "tracks" 0 ply tracks --airframe TST-0002 --site T04 \
    && expect_out "tracks" "present at the baseline"
expect_out "tracks" "linearly"
expect_out "tracks" "does not replace"
expect_out "tracks" "EXAMPLE VALUES, NOT APPROVED DATA"
run "tracks json" 0 ply tracks --airframe TST-0002 --site T04 --json
"$PY" - "$WORK/out" <<'PY' || fail "tracks --json"
import json, sys
t = json.load(open(sys.argv[1]))
assert "does not replace" in t["caution"] and "linearly" in t["assumptions"], t.keys()
assert t["quantity"] and t["criteria"]["marking"] == "EXAMPLE VALUES, NOT APPROVED DATA", t["criteria"]
tr = [x for x in t["tracks"] if x["reportable"]]
assert tr, "no reportable track"
for x in tr:
    # the baseline's point and the scheduled inspection's, in date order
    d = [p["date"] for p in x["points"]]
    assert d == sorted(d) and d[0] == "2015-06-01", d
    assert x["growth"]["cycles"]["state"] in ("too few points", "not growing", "growing", "limit reached"), x["growth"]
PY
run "tracks csv" 0 ply tracks --airframe TST-0002 --site T04 --csv points --output "$WORK/tracks.csv" -q
"$PY" - "$WORK/tracks.csv" "$WORK/out" <<'PY' || fail "tracks --csv points"
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1], newline="")))
assert rows and {"track", "date", "cycles", "area_mm2", "event"} <= set(rows[0]), rows[:1]
assert all(r["site"] == "T04" for r in rows)
assert open(sys.argv[2]).read() == "", "the rows went to standard output too"
PY
run "tracks csv growth" 0 ply tracks --airframe TST-0002 --site T04 --csv growth \
    && expect_out "tracks csv growth" "cycles_state"
run "tracks csv unknown table" 2 ply tracks --airframe TST-0002 --site T04 --csv spreadsheet
run "tracks csv and json" 2 ply tracks --airframe TST-0002 --site T04 --csv points --json
run "tracks unknown site" 1 ply tracks --airframe TST-0002 --site T99 \
    && expect_one_line_err "tracks unknown site" "T99"
run "tracks onto the store" 1 ply tracks --airframe TST-0002 --site T04 --output "$STORE"
run "coverage" 4 ply coverage --airframe TST-0002 --task hc-1 \
    && expect_out "coverage" "NOT INSPECTED in check hc-1 of TST-0002"
head -1 "$WORK/out" | grep -q "^NOT INSPECTED" || fail "coverage: the missed sites are not the first line"
expect_out "coverage" "compared"
run "coverage json" 4 ply coverage --airframe TST-0002 --task HC-1 --json
"$PY" - "$WORK/out" <<'PY' || fail "coverage --json"
import json, sys
c = json.load(open(sys.argv[1]))
assert c["missed_warning"].startswith("NOT INSPECTED"), c["missed_warning"]
assert "T04" not in c["missed"] and c["counts"]["missed"] == len(c["missed"]) > 0, c["counts"]
t04 = [s for s in c["sites"] if s["site"] == "T04"][0]
assert t04["state"] == "compared" and 0.8 < t04["compared_fraction"] <= 1, t04
assert abs(t04["area_mm2"] - 96 * 72) < 1e-6, t04
PY
run "coverage csv" 4 ply coverage --airframe TST-0002 --task HC-1 --csv --output "$WORK/coverage.csv"
grep -q "NOT INSPECTED" "$WORK/err" || fail "coverage --csv --output: the missed sites are not said on stderr"
head -1 "$WORK/coverage.csv" | grep -q '"airframe","task","site"' || fail "coverage --csv: header"
run "history csv" 0 ply history --airframe TST-0002 --site T04 --csv --output "$WORK/history.csv"
"$PY" - "$WORK/history.csv" <<'PY' || fail "history --csv"
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1], newline="")))
assert [r["kind"] for r in rows][0] == "baseline" and len(rows) >= 2, rows
assert [r["performed_on"] for r in rows] == sorted(r["performed_on"] for r in rows)
done = [r for r in rows if r["comparison_status"] == "done"]
assert done and done[-1]["criteria"].startswith("EXAMPLE-CR7-GROWTH rev "), done
assert int(done[-1]["stable"]) >= 0 and done[-1]["against_inspection"] == rows[0]["inspection"], done[-1]
PY
run "history json to a file" 0 ply history --airframe TST-0002 --site T04 --json -o "$WORK/history.json"
"$PY" -c 'import json,sys; j=json.load(open(sys.argv[1])); assert j["site"]["site"] == "T04"' "$WORK/history.json" \
    || fail "history --json --output"
run "history csv and json" 2 ply history --airframe TST-0002 --site T04 --csv --json
run "history text to a file" 2 ply history --airframe TST-0002 --site T04 -o "$WORK/history.txt"
run "history csv onto the store" 1 ply history --airframe TST-0002 --site T04 --csv -o "$STORE"
run "coverage unknown task" 1 ply coverage --airframe TST-0002 --task NO-SUCH \
    && expect_one_line_err "coverage unknown task" "NO-SUCH"
run "compare check says what it missed" 4 ply compare --airframe TST-0002 --task HC-1 --criteria EXAMPLE-CR7-GROWTH --dry-run \
    && expect_out "compare check says what it missed" "NOT INSPECTED"
head -1 "$WORK/out" | grep -q "^NOT INSPECTED" || fail "compare --task: the missed sites are not the first line"
run "report site" 0 ply report --comparison "$CMP" --output "$WORK/site.html" \
    && expect_out "report site" "report written to"
run "report by site" 0 ply report --airframe TST-0002 --site T04 --output "$WORK/site2.html" --no-verify -q
run "report check" 0 ply report --airframe TST-0002 --task HC-1 --output "$WORK/check.html" --json
"$PY" -c 'import json,sys; j=json.load(open(sys.argv[1])); assert j["bytes"] > 1000 and j["comparison"] is None, j' "$WORK/out" \
    || fail "report --json"
grep -q "NOT INSPECTED in check HC-1 of TST-0002" "$WORK/check.html" || fail "report check: the missed sites are not said"
grep -q "Record not verified" "$WORK/site2.html" || fail "report --no-verify: does not say so"
grep -q "Record verified" "$WORK/site.html" || fail "report: the verify result is not shown"
run "report onto the store" 1 ply report --comparison "$CMP" --output "$STORE"
run "report unknown comparison" 1 ply report --comparison 99999 --output "$WORK/none.html" \
    && expect_one_line_err "report unknown comparison" "99999"
[ ! -e "$WORK/none.html" ] || fail "a refused report left a file"
run "report without output" 2 ply report --comparison "$CMP"
run "report comparison and site" 2 ply report --comparison "$CMP" --airframe TST-0002 --site T04 --output "$WORK/x.html"
run "report bad comparison" 2 ply report --comparison 12abc --output "$WORK/x.html"
# The report in a real browser (Debian's chromium, headless) and through a
# strict HTML5 parser: not under valgrind, which does not run the browser.
if [ -z "$WRAP" ]; then
    # the check report of a check whose one compared site is stable holds no
    # site section, so no pictures: its coverage table and its warning
    for r in site:4 check:0; do
        n=${r#*:}; r=${r%:*}
        "$PY" "$HERE/check_report.py" "$WORK/$r.html" --screenshot "$WORK/$r.png" \
            --min-images "$n" --expect "TST-0002" --expect "does not replace" >"$WORK/browser.out" 2>&1 \
            || { cat "$WORK/browser.out"; fail "report $r: the browser or HTML check"; }
        grep "^result:\|^screenshot:" "$WORK/browser.out"
    done
    if [ -n "${PL_ARTEFACT_DIR:-}" ]; then
        mkdir -p "$PL_ARTEFACT_DIR" && cp "$WORK/check.png" "$PL_ARTEFACT_DIR/report-check-screenshot.png"
    fi
fi

# ---- the hand-over package -------------------------------------------------------
run "package --help" 0 ply package --help && expect_out "package --help" "usage: plyledger package"
run "package export" 0 ply package export --airframe TST-0002 --output "$WORK/tst2.plpkg" \
    && expect_out "package export" "bytes"
[ "$(sqlite3 "$WORK/tst2.plpkg" 'PRAGMA journal_mode; PRAGMA application_id')" = "$(printf 'delete\n1349286224')" ] \
    || fail "package: not a rollback-journal file with its own application id"
run "package export onto the store" 1 ply package export --airframe TST-0002 --output "$STORE"
run "package export unknown airframe" 1 ply package export --airframe NOPE-1 --output "$WORK/nope.plpkg"
[ ! -e "$WORK/nope.plpkg" ] || fail "package export of an unknown airframe left a file"
run "package check" 0 ply package check "$WORK/tst2.plpkg" && expect_out "package check" "sound"
run "package create receiver" 0 ply create "$WORK/recv.plyledger" --seal-key "$WORK/recv.key"
run "package import" 0 ply package import "$WORK/tst2.plpkg" --store "$WORK/recv.plyledger" --seal-key "$WORK/recv.key"
run "package import again" 0 ply package import "$WORK/tst2.plpkg" --store "$WORK/recv.plyledger" --seal-key "$WORK/recv.key" \
    && expect_out "package import again" "already received"
run "package receiver verifies" 0 ply verify --store "$WORK/recv.plyledger" && expect_out "package receiver verifies" "is intact"
run "package dispositions came along" 0 ply dispositions --store "$WORK/recv.plyledger" && expect_out "package dispositions came along" "signed by n.example"
cp "$WORK/tst2.plpkg" "$WORK/bad.plpkg"
sqlite3 "$WORK/bad.plpkg" "DROP TRIGGER inspection_no_update; UPDATE inspection SET inspector = 'someone else'"
run "package tampered" 1 ply package check "$WORK/bad.plpkg"
run "package create receiver 2" 0 ply create "$WORK/recv2.plyledger" --seal-key "$WORK/recv2.key"
run "package tampered import" 1 ply package import "$WORK/bad.plpkg" --store "$WORK/recv2.plyledger" --seal-key "$WORK/recv2.key"
head -c 40000 "$WORK/tst2.plpkg" >"$WORK/cut.plpkg"
run "package truncated import" 1 ply package import "$WORK/cut.plpkg" --store "$WORK/recv2.plyledger" --seal-key "$WORK/recv2.key"
run "package nothing imported" 0 ply summary --store "$WORK/recv2.plyledger" --json
"$PY" -c 'import json,sys; s=json.load(open(sys.argv[1])); assert s["airframes"] == 0 and s["ledger_links"] == 0, s' "$WORK/out" \
    || fail "a refused package left rows behind"

# The record itself refuses changes in place.
sqlite3 "$STORE" "UPDATE inspection SET inspector='x'" 2>"$WORK/err" && fail "UPDATE of an inspection was allowed"
grep -q "append-only" "$WORK/err" || fail "UPDATE refusal message"

sqlite3 "$STORE" "PRAGMA integrity_check" | grep -qx ok || fail "integrity_check"

echo "$COUNT commands run, $FAILS failure(s)"
[ "$FAILS" -eq 0 ]
