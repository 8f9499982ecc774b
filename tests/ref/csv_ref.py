"""Read a CSV table with Python's csv module and check its shape and cells.

Usage: csv_ref.py FILE ROWS [ROW:COLUMN=VALUE]...
The first row names the columns. Exit 0 when the file parses as CSV
(RFC 4180: Python's csv module, default dialect), every row has as many
fields as the header, there are ROWS rows below the header, and each named
cell (ROW counted from 0 below the header, COLUMN a header name) holds
exactly VALUE.
"""
import csv
import sys


def main():
    path, rows = sys.argv[1], int(sys.argv[2])
    with open(path, encoding="utf-8", newline="") as f:
        table = list(csv.reader(f, strict=True))
    header, body = table[0], table[1:]
    if len(set(header)) != len(header):
        sys.exit("%s: a column name repeats: %r" % (path, header))
    for i, r in enumerate(body):
        if len(r) != len(header):
            sys.exit("%s: row %d has %d fields, the header %d" % (path, i, len(r), len(header)))
    if len(body) != rows:
        sys.exit("%s: %d rows, expected %d" % (path, len(body), rows))
    for spec in sys.argv[3:]:
        where, want = spec.split("=", 1)
        row, col = where.split(":", 1)
        got = body[int(row)][header.index(col)]
        if got != want:
            sys.exit("%s: row %s column %s is %r, expected %r" % (path, row, col, got, want))


if __name__ == "__main__":
    main()
