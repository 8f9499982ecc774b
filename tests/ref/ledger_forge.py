"""A forger who knows the documented encodings (lib/include/plyledger/
ledger.h, store_row.h): appends an operator change to the first
airframe's record with Python's sqlite3 and its ledger link recomputed
with hashlib, as plyledger would have written it.

Usage: ledger_forge.py STORE
"""
import hashlib
import os
import sqlite3
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import ledger_ref  # noqa: E402


def main():
    db = sqlite3.connect(sys.argv[1])
    db.text_factory = bytes
    chain = db.execute("SELECT min(coalesce(key, id)) FROM airframe").fetchone()[0]
    at = "2026-01-01T00:00:00.000Z"
    cur = db.execute("INSERT INTO airframe_operator (airframe_key, operator_name, since, "
                     "recorded_at) VALUES (?, 'Forged Operator', '2025-12-01', ?)", (chain, at))
    rowid = cur.lastrowid
    data = ledger_ref.row_bytes(db, "airframe_operator", rowid)
    row_sha = hashlib.sha256(data).digest()
    seq, last = db.execute("SELECT seq, link FROM ledger WHERE chain = ? ORDER BY seq DESC "
                           "LIMIT 1", (chain,)).fetchone()
    prev = bytes.fromhex(last.decode())
    link = ledger_ref.link(prev, seq + 1, b"airframe_operator", rowid, 1, row_sha)
    db.execute("INSERT INTO ledger (chain, seq, table_name, row_id, encoding, row_sha256, "
               "prev_link, link, recorded_at) VALUES (?, ?, 'airframe_operator', ?, 1, ?, ?, ?, "
               "?)", (chain, seq + 1, rowid, row_sha.hex(), prev.hex(), link.hex(), at))
    db.commit()


if __name__ == "__main__":
    main()
