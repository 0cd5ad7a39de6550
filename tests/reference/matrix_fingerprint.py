"""Recompute the documented matrix fingerprint (docs/matrices.md) with Python's
hashlib and struct, independently of tally's Rust code, and write
tests/reference/matrix_fingerprint.json for the Rust test
`matrix::tests::fingerprint_matches_independent_implementation`.

Run: python3 tests/reference/matrix_fingerprint.py
"""
import hashlib
import json
import math
import pathlib
import platform
import struct
import sys

CASES = [
    {
        "labels": ["S07/2016", "\u00c4-1"],
        "taxa": ["Baetis", "Ecdyonurus", "Oligochaeta"],
        "values": [[1.0, 0.5, 0.0], [0.1, 1e300, 3.0]],
    },
    {
        "labels": ["E1"],
        "taxa": ["Baetis"],
        "values": [[2.375]],
    },
]


def fingerprint(labels, taxa, values):
    h = hashlib.sha256()
    h.update(b"tally-matrix-v1")
    h.update(struct.pack("<QQ", len(values), len(taxa)))
    for s in list(labels) + list(taxa):
        b = s.encode("utf-8")
        h.update(struct.pack("<Q", len(b)))
        h.update(b)
    for row in values:
        for v in row:
            if math.isnan(v):
                bits = 0x7FF8000000000000
            elif v == 0.0:
                bits = 0
            else:
                bits = struct.unpack("<Q", struct.pack("<d", v))[0]
            h.update(struct.pack("<Q", bits))
    return h.hexdigest()


def main():
    out = {
        "generator": "tests/reference/matrix_fingerprint.py (hashlib, struct)",
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "cases": [dict(c, fingerprint=fingerprint(c["labels"], c["taxa"], c["values"])) for c in CASES],
    }
    path = pathlib.Path(__file__).with_name("matrix_fingerprint.json")
    path.write_text(json.dumps(out, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
