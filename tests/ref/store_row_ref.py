"""The canonical row encoding, written again from its definition in
lib/include/plyledger/store_row.h, for the store tests to compare with.

Usage: store_row_ref.py STORE TABLE ID OUT
Reads row ID of TABLE from the SQLite file STORE with Python's sqlite3,
encodes it with struct (little-endian), and writes the bytes to OUT. The
columns and their declared types come from SQLite's PRAGMA table_info, not
from the library's descriptions; a map leaves out its data blob and takes
its channels (map_channel rows, by idx) as the child rows "map_channel".
"""
import sqlite3
import struct
import sys

VERSION = 1
CHILDREN = {"map": ("map_channel", "map_id", "idx")}
LEFT_OUT = {"map": {"data"}}


def text(b):
    return struct.pack("<I", len(b)) + b


def value(declared, v):
    if v is None:
        return b"\x00"
    if declared == "INTEGER":
        return b"\x01" + struct.pack("<q", int(v))
    if declared == "REAL":
        v = float(v)
        if v != v:
            raise ValueError("NaN has no canonical form")
        if v == 0.0:
            v = 0.0
        return b"\x02" + struct.pack("<d", v)
    if declared == "TEXT":
        if isinstance(v, str):
            v = v.encode("utf-8")
        v.decode("utf-8")  # refuses text that is not UTF-8
        return b"\x03" + text(v)
    return b"\x04" + text(bytes(v))


def columns(db, table):
    cols = [(r[1].decode(), r[2].decode())
            for r in db.execute("SELECT * FROM pragma_table_info(?)", (table,))]
    return [c for c in cols if c[0] not in LEFT_OUT.get(table, ())]


def body(db, table, row, cols):
    entries = [(name.encode(), value(decl, v)) for (name, decl), v in zip(cols, row)]
    if table in CHILDREN:
        child, parent, index = CHILDREN[table]
        ccols = columns(db, child)
        names = ", ".join(c for c, _ in ccols)
        rows = db.execute("SELECT %s FROM %s WHERE %s = ? ORDER BY %s" % (names, child, parent,
                          index), (row[[c for c, _ in cols].index("id")],)).fetchall()
        kids = struct.pack("<I", len(rows)) + b"".join(body(db, child, r, ccols) for r in rows)
        entries.append((child.encode(), b"\x05" + kids))
    entries.sort()
    return struct.pack("<I", len(entries)) + b"".join(text(n) + v for n, v in entries)


def main():
    store, table, rowid, out = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
    db = sqlite3.connect(store)
    db.text_factory = bytes
    cols = columns(db, table)
    row = db.execute("SELECT %s FROM %s WHERE id = ?" % (", ".join(c for c, _ in cols), table),
                     (rowid,)).fetchone()
    if row is None:
        sys.exit("%s: no row %d in %s" % (store, rowid, table))
    data = b"PLRW" + struct.pack("<I", VERSION) + text(table.encode()) + body(db, table, row,
                                                                             cols)
    with open(out, "wb") as f:
        f.write(data)


if __name__ == "__main__":
    main()
