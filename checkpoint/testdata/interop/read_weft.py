#!/usr/bin/python3
"""Read weft_written.safetensors (written by weft's Go encoder) with an
independent reader and print what it finds as JSON to weft_written.json.

Uses only json, struct and hashlib, following the public safetensors layout
and the checksum definition in the package documentation: SHA-256 over the
whole file with the 64 hex digits of the "weft.checksum" metadata value
replaced by ASCII zeros. The Go test TestPythonReadsOurFile compares the
output with the content it wrote.

Run from this directory: /usr/bin/python3 read_weft.py
"""
import hashlib
import json
import struct

FORMATS = {"F32": ("f", 4), "F64": ("d", 8), "I32": ("i", 4),
           "I64": ("q", 8), "U8": ("B", 1)}


def main():
    with open("weft_written.safetensors", "rb") as f:
        raw = f.read()
    (n,) = struct.unpack("<Q", raw[:8])
    header = json.loads(raw[8:8 + n].decode("utf-8"))
    buf = raw[8 + n:]
    meta = header.pop("__metadata__")
    digits = meta["weft.checksum"].encode("ascii")
    assert raw.count(digits) == 1
    zeroed = raw.replace(digits, b"0" * 64)
    out = {
        "header_length": n,
        "data_starts_aligned": (8 + n) % 8 == 0,
        "checksum_ok": hashlib.sha256(zeroed).hexdigest() == meta["weft.checksum"],
        "metadata": meta,
        "tensors": {},
    }
    covered = 0
    for name, entry in header.items():
        fmt, size = FORMATS[entry["dtype"]]
        begin, end = entry["data_offsets"]
        count = (end - begin) // size
        values = list(struct.unpack("<%d%s" % (count, fmt), buf[begin:end]))
        out["tensors"][name] = {"dtype": entry["dtype"], "shape": entry["shape"],
                                "values": values}
        covered += end - begin
    out["buffer_covered"] = covered == len(buf)
    with open("weft_written.json", "w") as f:
        json.dump(out, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
