"""The hash chain, checked again from its definition in
lib/include/plyledger/ledger.h with Python's sqlite3, struct and hashlib
(the row encoding from store_row_ref.py, written from store_row.h).

Usage: ledger_ref.py STORE OUT
Walks every chain of the ledger in seq order, hashes each linked row again
and recomputes each link from the one before it (32 zero bytes before the
first). Writes to OUT one line: "ok LINKS" when every row hash and link
agrees, else "fault TABLE ROW_ID SEQ WHAT" for the first that does not.
"""
import hashlib
import os
import sqlite3
import struct
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import store_row_ref as rowref  # noqa: E402

LINK_VERSION = 1


def row_bytes(db, table, rowid):
    cols = rowref.columns(db, table)
    row = db.execute("SELECT %s FROM %s WHERE id = ?" % (", ".join(c for c, _ in cols), table),
                     (rowid,)).fetchone()
    if row is None:
        return None
    return (b"PLRW" + struct.pack("<I", rowref.VERSION) + rowref.text(table.encode()) +
            rowref.body(db, table, row, cols))


def link(prev, seq, table, rowid, encoding, row_sha):
    return hashlib.sha256(b"PLLK" + struct.pack("<I", LINK_VERSION) + prev +
                          struct.pack("<Q", seq) + rowref.text(table) +
                          struct.pack("<q", rowid) + struct.pack("<I", encoding) +
                          row_sha).digest()


def main():
    store, out = sys.argv[1], sys.argv[2]
    db = sqlite3.connect(store)
    db.text_factory = bytes
    result, count = None, 0
    chains = [r[0] for r in db.execute(
        "SELECT DISTINCT coalesce(chain, 0) FROM ledger ORDER BY 1")]
    for chain in chains:
        prev = bytes(32)
        for seq, table, rowid, enc, row_hex, prev_hex, link_hex in db.execute(
                "SELECT seq, table_name, row_id, encoding, row_sha256, prev_link, link "
                "FROM ledger WHERE coalesce(chain, 0) = ? ORDER BY seq", (chain,)):
            count += 1
            name = table.decode()
            data = row_bytes(db, name, rowid)
            what = None
            if data is None:
                what = "row-missing"
            elif hashlib.sha256(data).hexdigest() != row_hex.decode():
                what = "row-changed"
            elif bytes.fromhex(prev_hex.decode()) != prev:
                what = "prev-link"
            elif link(prev, seq, table, rowid, enc, bytes.fromhex(row_hex.decode())).hex() != \
                    link_hex.decode():
                what = "link"
            if what and result is None:
                result = "fault %s %d %d %s" % (name, rowid, seq, what)
            prev = bytes.fromhex(link_hex.decode())
    with open(out, "w") as f:
        f.write((result or "ok %d" % count) + "\n")


if __name__ == "__main__":
    main()
