"""Read a JSON document with Python's json module and check one value.

Usage: json_ref.py FILE PATH WANT
PATH is keys and list indexes joined by '/'; WANT is the expected value as
JSON. Exit 0 when the document parses and the value at PATH equals WANT.
"""
import json
import sys


def main():
    path, where, want = sys.argv[1], sys.argv[2], json.loads(sys.argv[3])
    with open(path, encoding="utf-8") as f:
        value = json.load(f)
    for part in where.split("/"):
        value = value[int(part)] if isinstance(value, list) else value[part]
    if value != want:
        sys.exit("%s: %s is %r, expected %r" % (path, where, value, want))


if __name__ == "__main__":
    main()
