#!/usr/bin/python3
"""make_batch.py DIR SERIAL SITES [CHANNELS] - a large recording batch for the CLI tests.

Writes into DIR, for airframe SERIAL: plan-SERIAL.csv, a site plan of SITES
flash-thermography sites (codes <first letter of SERIAL>000, ...) at 0.5 mm,
one .npy map per site (numpy, float32 noise of 0.05 K), and
batch-SERIAL.json, one sidecar recording the baselines of all of them. With
CHANNELS 1 (the default) the maps are 128 x 96 pixels of temperature
contrast; with more they are 96 x 72 (the sample fleet's sites) with that
many channels (up to 8: temperature contrast, normalised contrast, the
log-derivatives, time of peak, depth, phase, amplitude), as a reduction
writes them.
"""
import json
import sys
import zlib

import numpy as np


def main():
    d, serial, n = sys.argv[1], sys.argv[2], int(sys.argv[3])
    nch = int(sys.argv[4]) if len(sys.argv) > 4 else 1
    w, h = (128, 96) if nch == 1 else (96, 72)
    quantities = [("temperature-contrast", "K"), ("normalised-contrast", "1"),
                  ("log-derivative-1", "1"), ("log-derivative-2", "1"), ("time-of-peak-d2", "s"),
                  ("depth", "mm"), ("phase", "rad"), ("amplitude", "K")]
    channels = [{"quantity": q, "unit": u} for q, u in quantities[:nch]]
    rng = np.random.default_rng(zlib.crc32(serial.encode()))
    prefix = serial[0].upper()
    with open("%s/plan-%s.csv" % (d, serial), "w") as f:
        f.write("site,method,origin_x,origin_y,origin_z,u_x,u_y,u_z,v_x,v_y,v_z,"
                "width_px,height_px,pitch_mm\n")
        for i in range(n):
            f.write("%s%03d,flash-thermography,%d,-1850,2100,1,0,0,0,0,-1,%d,%d,0.5\n"
                    % (prefix, i, 10000 + 100 * i, w, h))
    sites = []
    for i in range(n):
        name = "%s-%03d.npy" % (serial, i)
        shape = (h, w) if nch == 1 else (nch, h, w)
        np.save("%s/%s" % (d, name), rng.normal(0.0, 0.05, shape).astype(np.float32))
        sites.append({"site": "%s%03d" % (prefix, i), "maps": [{"file": name, "channels": channels}]})
    with open("%s/batch-%s.json" % (d, serial), "w") as f:
        json.dump({"airframe": serial, "kind": "baseline", "date": "2015-02-01",
                   "procedure": "NDT-TEST-01", "procedure_revision": "A",
                   "equipment": "test-rig", "calibration": "RS-T1", "inspector": "tester",
                   "inspector_level": "2", "sites": sites}, f)


if __name__ == "__main__":
    main()
