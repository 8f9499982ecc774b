#!/bin/sh
# make_fixtures.sh - the input files the CLI tests share, written into DIR.
#
# Usage: make_fixtures.sh DIR   (PL_PYTHON: Debian's python3 with numpy and pypng)
#
#   plan.csv             a site plan of three sites (T01-T03) of 40 x 30 px at 0.5 mm
#   t01_base.npy/.raw    numpy: a float32 40 x 30 map (one NaN), and its raw values
#   t01_f64.npy          the same map x 1.5 as float64
#   t01_noisy.npy        the same map with noise of 0.001 (a reinspection of it)
#   t02_two.npy          a two-channel float32 map
#   bad_int64.npy        int64 values (not a map dtype)
#   bad_rank.npy         a 4-D array
#   bad_size.npy         31 x 40 (the sites are 40 x 30)
#   rgb.png, grey16.png  pypng: an RGB PNG (not grey) and a good 16-bit grey one
#   truncated.png        the good one cut short
#   not-a-store.plyledger  a text file
#   foreign.db           an SQLite database that is not a store
#   scene.json           a small simulated scene (40 x 30, 200 frames, one delamination)
set -eu
D=$1
PY=${PL_PYTHON:-/usr/bin/python3}

cat >"$D/plan.csv" <<'CSV'
site,zone,description,frame,stringer,method,material,thickness_mm,diffusivity_mm2_s,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,width_px,height_px,pitch_mm
T01,253,"Window belt, left, frames 20-21",FR 20,STR 14L,flash-thermography,CFRP-QI-4,4.0,0.42,10250,-1850,2100,1,0,0,0,0,-1,40,30,0.5
T02,253,Keel beam splice,FR 22,STR 40,flash-thermography,CFRP-QI-4,4.0,0.42,10900,0,-300,1,0,0,0,1,0,40,30,0.5
T03,254,Door surround aft corner,FR 31,STR 12R,flash-thermography,CFRP-QI-6,6.0,0.42,14100,1900,1950,1,0,0,0,0,-1,0,0,0.5
CSV

"$PY" - "$D" <<'PY'
import sys, numpy as np
d = sys.argv[1]
rng = np.random.default_rng(7)
m = rng.normal(0.0, 0.05, (30, 40)).astype(np.float32)
m[10:16, 12:20] += 0.8
m[0, 0] = np.nan
np.save(d + "/t01_base.npy", m)
np.save(d + "/t01_f64.npy", (m.astype(np.float64) * 1.5))
np.save(d + "/t01_noisy.npy", (m + rng.normal(0.0, 1e-3, m.shape)).astype(np.float32))
np.save(d + "/t02_two.npy", np.stack([m, m * 2]).astype(np.float32))
np.save(d + "/bad_int64.npy", np.zeros((30, 40), dtype=np.int64))
np.save(d + "/bad_rank.npy", np.zeros((1, 2, 30, 40), dtype=np.float32))
np.save(d + "/bad_size.npy", np.zeros((31, 40), dtype=np.float32))
m.astype("<f4").tofile(d + "/t01_base.raw")
PY

"$PY" - "$D" <<'PY'
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

printf 'this is not a database, just text\n' >"$D/not-a-store.plyledger"
sqlite3 "$D/foreign.db" "CREATE TABLE t(x); INSERT INTO t VALUES(1);"

cat >"$D/scene.json" <<'JSON'
{ "format": "plyledger-scene-1", "seed": 5,
  "laminate": { "thickness_mm": 3.0, "density_kg_m3": 1560, "specific_heat_j_kgk": 1200,
    "conductivity_along_w_mk": 2.5, "conductivity_across_w_mk": 2.0, "conductivity_through_w_mk": 0.75 },
  "flash": { "energy_j_m2": 8000 },
  "camera": { "width": 40, "height": 30, "pitch_mm": 0.5, "frame_rate_hz": 50, "frame_count": 200,
    "netd_k": 0.02, "storage": "uint16", "gain_k": 0.004, "offset_k": 273.15, "saturation_count": 16383 },
  "defects": [ { "kind": "delamination", "depth_mm": 0.8, "resistance_m2k_w": 0.1,
    "outline": { "shape": "circle", "centre_mm": [10, 7.5], "diameter_mm": 8 } } ] }
JSON
