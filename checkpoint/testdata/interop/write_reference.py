#!/usr/bin/python3
"""Write reference.safetensors with an independent safetensors writer.

Uses only json and struct, following the public safetensors layout: an
8-byte little-endian unsigned header length N, N bytes of JSON header
mapping each tensor name to {"dtype", "shape", "data_offsets": [begin, end]}
(offsets relative to the start of the data buffer) plus an optional
"__metadata__" object of strings, the header padded with spaces so that the
data starts on an 8-byte boundary, then the raw little-endian tensor bytes.

Deliberately unlike weft's own writer: json.dumps with its default
separators (spaces), tensors in insertion order rather than sorted, and data
laid out in an order that differs from the name order. The Go test
TestReadReferenceFile embeds the values below.

Run from this directory: /usr/bin/python3 write_reference.py
"""
import json
import struct

# name -> (dtype, shape, struct format char, values)
TENSORS = [
    ("weight", "F32", [2, 3], "f", [0.5, -1.25, 3.0, 1e-3, -0.0, 65504.0]),
    ("bias", "F64", [3], "d", [3.141592653589793, -2.5e-300, 1e300]),
    ("steps", "I64", [2], "q", [-9007199254740993, 9223372036854775807]),
    ("ids", "I32", [2, 2], "i", [-2147483648, -1, 0, 2147483647]),
    ("mask", "U8", [5], "B", [0, 1, 127, 128, 255]),
    ("scalar", "F32", [], "f", [42.0]),
    ("empty", "F32", [0, 3], "f", []),
]
METADATA = {"format": "pt", "note": "written by write_reference.py"}


def main():
    header = {"__metadata__": METADATA}
    buf = b""
    # Lay the data out in reverse order of the list, so that offsets do not
    # follow the header's order.
    for name, dtype, shape, fmt, values in reversed(TENSORS):
        data = struct.pack("<%d%s" % (len(values), fmt), *values)
        header[name] = {"dtype": dtype, "shape": shape,
                        "data_offsets": [len(buf), len(buf) + len(data)]}
        buf += data
    ordered = {"__metadata__": METADATA}
    for name, *_ in TENSORS:
        ordered[name] = header[name]
    text = json.dumps(ordered).encode("utf-8")
    text += b" " * ((8 - (8 + len(text)) % 8) % 8)
    with open("reference.safetensors", "wb") as f:
        f.write(struct.pack("<Q", len(text)))
        f.write(text)
        f.write(buf)


if __name__ == "__main__":
    main()
