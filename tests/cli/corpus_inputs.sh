#!/bin/sh
# corpus_inputs.sh - the hostile input files of corpus.tsv, written into DIR
# beside make_fixtures.sh's files (which they are made from) and the
# prepared store's sequence (seq.json, seq.npy).
#
# Usage: corpus_inputs.sh DIR   (PL_PYTHON: Debian's python3 with numpy)
set -eu
D=$1
PY=${PL_PYTHON:-/usr/bin/python3}
cd "$D"

# site plans: a missing column, a code twice, NaN and negative pitches, a
# site the airframe already has
printf 'site,zone,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z\nS1,1,flash-thermography,0,0,0,1,0,0,0,1,0\n' >plan_missing.csv
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/N01/'; sed -n 2p plan.csv | sed 's/^T01/N01/'; } >plan_dup.csv
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/N02/; s/,0\.5$/,nan/'; } >plan_nan.csv
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/N03/; s/,0\.5$/,-0.5/'; } >plan_neg.csv
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/N04/'; sed -n 2p plan.csv; } >plan_exists.csv

# sidecars: a misspelt key, JSON cut short
cat >bad_sidecar.json <<'JSON'
{ "airframe": "TST-0002", "kind": "scheduled", "date": "2021-01-01", "inspecter": "typo",
  "sites": [ { "site": "T01" } ] }
JSON
printf '{ "airframe": ' >broken.json

# sequences: frame times not increasing, a cube cut short, a pitch that is
# not the site's
"$PY" - seq.json seq_times.json <<'PY'
import json, sys
m = json.load(open(sys.argv[1]))
del m["frame_rate_hz"]
m["frame_times_s"] = [0.02 * i for i in range(200)]
m["frame_times_s"][50] = m["frame_times_s"][49]
json.dump(m, open(sys.argv[2], "w"))
PY
cp seq.npy short.npy
"$PY" -c 'import os,sys; os.truncate(sys.argv[1], os.path.getsize(sys.argv[1]) - 1000)' short.npy
sed 's/"seq.npy"/"short.npy"/' seq.json >seq_short.json
"$PY" - seq.json seq_pitch.json <<'PY'
import json, sys
m = json.load(open(sys.argv[1])); m["pitch_mm"] = [1.0, 1.0]
json.dump(m, open(sys.argv[2], "w"))
PY

# a scene with an unknown key
sed 's/"seed": 5,/"seed": 5, "colour": 1,/' scene.json >scene_bad.json

# maps no inspection produces: infinities, float64 beyond float32's range,
# no data at all, bytes after the data
"$PY" - <<'PY'
import numpy as np
m = np.load("t01_base.npy")
a = m.copy(); a[3, 5] = np.inf; a[7, 9] = np.inf; np.save("inf.npy", a)
a = m.copy(); a[4, 6] = -np.inf; np.save("neginf.npy", a)
a = m.astype(np.float64); a[2, 2] = 1e300; np.save("f64_huge.npy", a)
np.save("all_nan.npy", np.full((30, 40), np.nan, dtype=np.float32))
np.save("trailing.npy", m)
with open("trailing.npy", "ab") as f:
    f.write(b"\0" * 64)
PY

# sidecars: no maps, a site twice, numbers out of range, an axis of no
# length
sidecar() {  # NAME SITES-JSON [EXTRA-TOP-LEVEL-JSON]
    cat >"$1" <<JSON
{ "airframe": "TST-0001", "kind": "scheduled", "date": "2021-01-01",
  "procedure": "NDT-TEST-01", "procedure_revision": "A", "equipment": "test-rig",
  "calibration": "RS-T1", "inspector": "tester", "inspector_level": "2",
  ${3:-}
  "sites": $2 }
JSON
}
MAP='{ "file": "t01_base.npy", "channels": [ { "quantity": "temperature-contrast" } ] }'
sidecar no_maps.json '[ { "site": "T01", "maps": [] } ]'
sidecar site_twice.json "[ { \"site\": \"T01\", \"maps\": [ $MAP ] }, { \"site\": \"T01\", \"maps\": [ $MAP ] } ]"
sidecar cycles_huge.json "[ { \"site\": \"T01\", \"maps\": [ $MAP ] } ]" '"hours": 9500, "cycles": 1e30,'
sidecar cycles_2p53.json "[ { \"site\": \"T01\", \"maps\": [ $MAP ] } ]" '"hours": 9500, "cycles": 9007199254740993,'
sidecar pitch_huge.json '[ { "site": "T01", "maps": [ { "file": "t01_base.npy", "pitch_mm": 1e308, "channels": [ { "quantity": "temperature-contrast" } ] } ] } ]'
sidecar axis_zero.json '[ { "site": "T01", "maps": [ { "file": "t01_base.npy", "channels": [ { "quantity": "temperature-contrast" } ], "placement": { "origin": [10250, -1850, 2100], "u": [0, 0, 0], "v": [0, 0, -1] } } ] } ]'

# site plans: a code that differs only in case, one with spaces around it,
# a pitch beyond any camera
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/t01/'; } >plan_case.csv
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/ T05 /'; } >plan_spaces.csv
{ head -1 plan.csv; sed -n 2p plan.csv | sed 's/^T01/N05/; s/,0\.5$/,1e308/'; } >plan_pitch_huge.csv

# a sequence cube with bytes after its data; empty files
cp seq.npy seq_trailing.npy
printf '\0\0\0\0\0\0\0\0' >>seq_trailing.npy
sed 's/"seq.npy"/"seq_trailing.npy"/' seq.json >seq_trailing.json
: >empty.json
: >empty.csv
: >empty.npy

# criteria sets: one the prepared store holds (criteria_ok.json), and each
# fault of a criteria file made from it
cat >criteria_ok.json <<'JSON'
{
  "format": "plyledger-criteria",
  "format_version": 1,
  "name": "TEST-LIMITS",
  "revision": "A",
  "source_document": "TEST-DOC-01",
  "example_values": true,
  "repeatability": { "area_mm2": 10 },
  "rules": [
    { "name": "joint", "kind": "no-growth", "method": "flash-thermography",
      "quantity": "temperature-contrast", "site": "T0*", "contrast_unit": "K",
      "repeatability_contrast": 0.05, "min_reportable_area_mm2": 20,
      "new_reportable_area_mm2": 20, "vanished": "investigate" },
    { "name": "skin", "kind": "growth-limit", "method": "flash-thermography",
      "quantity": "temperature-contrast", "contrast_unit": "K",
      "repeatability_contrast": 0.05, "min_reportable_area_mm2": 25,
      "new_reportable_area_mm2": 50, "area_growth_mm2": 40, "area_growth_percent": 25,
      "vanished": "report" }
  ]
}
JSON
sed 's/"area_growth_mm2"/"area_grow_mm2"/' criteria_ok.json >crit_typo.json
sed 's/"area_growth_mm2": 40/"area_growth_mm2": -5/' criteria_ok.json >crit_negative.json
sed 's/"area_growth_percent": 25/"area_growth_percent": 5000/' criteria_ok.json >crit_percent.json
sed 's/"area_growth_mm2": 40/"area_growth_mm2": 2e6/' criteria_ok.json >crit_area_huge.json
sed 's/"area_growth_mm2": 40/"area_growth_mm2": 1e999/' criteria_ok.json >crit_inf.json
sed 's/"area_growth_mm2": 40/"area_growth_mm2": "40"/' criteria_ok.json >crit_type.json
sed 's/"example_values": true/"example_values": "yes"/' criteria_ok.json >crit_marking.json
sed '0,/"flash-thermography"/s//"x-ray"/' criteria_ok.json >crit_method.json
sed '0,/"temperature-contrast"/s//"ultrasonic-amplitude"/' criteria_ok.json >crit_quantity.json
sed 's/"name": "skin"/"name": "joint"/' criteria_ok.json >crit_dup_name.json
sed 's/"site": "T0\*", //' criteria_ok.json >crit_dup_rule.json
sed 's/"vanished": "investigate" }/"vanished": "investigate", "area_growth_mm2": 30 }/' criteria_ok.json >crit_no_growth.json
sed 's/"name": "TEST-LIMITS"/"name": "TEST-LIMITS", "name": "OTHER"/' criteria_ok.json >crit_twice.json
"$PY" - criteria_ok.json <<'PY'
import json, sys
ok = open(sys.argv[1], "rb").read()
m = json.loads(ok)
m["rules"] = []
json.dump(m, open("crit_empty.json", "w"))
open("crit_utf8.json", "wb").write(ok.replace(b'"TEST-DOC-01"', b'"TEST-\xff-DOC"'))
open("crit_trailing.json", "wb").write(ok + b'{"more": 1}\n')
open("crit_oversize.json", "wb").write(ok + b" " * (1024 * 1024))
open("crit_array.json", "wb").write(b"[" + ok + b"]")
m = json.loads(ok)
m["rules"][1]["area_growth_mm2"] = 45
json.dump(m, open("crit_changed.json", "w"))
PY
