#!/usr/bin/env python3
"""Read a site plan with Python's csv module (an RFC 4180 reader) and compare
it field by field with what plyledger read.

Usage: store_plan_ref.py PLAN.csv PARSED.json

PARSED.json is a list of objects, one per site in file order, with the text
columns as strings and the numbers as "%.17g" strings. Lines whose first
field starts with '#' are comments (plyledger/plan.h). pitch_v_mm defaults
to pitch_mm. Exit 0 when everything agrees, 1 (naming the field) otherwise.
"""
import csv
import json
import sys

TEXT = ['site', 'method', 'zone', 'description', 'frame', 'stringer', 'material']
NUMBERS = ['origin_x', 'origin_y', 'origin_z', 'u_x', 'u_y', 'u_z', 'v_x', 'v_y', 'v_z',
           'pitch_mm', 'pitch_v_mm']


def main():
    plan, parsed = sys.argv[1], sys.argv[2]
    with open(plan, newline='', encoding='utf-8') as f:
        rows = [r for r in csv.reader(f) if r and not r[0].startswith('#')]
    header, rows = rows[0], rows[1:]
    ref = [dict(zip(header, r)) for r in rows]
    with open(parsed, encoding='utf-8') as f:
        got = json.load(f)
    if len(ref) != len(got):
        print('store_plan_ref: %d sites, plyledger read %d' % (len(ref), len(got)))
        return 1
    for i, (r, g) in enumerate(zip(ref, got)):
        if not r.get('pitch_v_mm'):
            r['pitch_v_mm'] = r['pitch_mm']
        for k in TEXT:
            if r.get(k, '') != g[k]:
                print('store_plan_ref: site %d %s: csv %r, plyledger %r' % (i, k, r.get(k), g[k]))
                return 1
        for k in NUMBERS:
            if float(r[k]) != float(g[k]):
                print('store_plan_ref: site %d %s: csv %r, plyledger %r' % (i, k, r[k], g[k]))
                return 1
    print('store_plan_ref: %d sites agree' % len(ref))
    return 0


if __name__ == '__main__':
    sys.exit(main())
