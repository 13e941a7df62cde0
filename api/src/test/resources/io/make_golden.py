#!/usr/bin/env python3
"""Makes the NumPy golden files for dev.rungbook.io tests (run from this folder: python3 make_golden.py).

Every file is written by NumPy itself (np.save, np.lib.format.write_array, np.savez, np.savez_compressed).
expected.json records, for each file and array, the shape and the float32 bit patterns NumPy gives for
arr.astype(np.float32) in C order: the reference the Java reader is compared with.
Values are fixed lists and formulas, no randomness, so re-running gives the same arrays.
"""
import json
import os

import numpy as np

OUT = "golden"
os.makedirs(OUT, exist_ok=True)
expected = {}

FLOATS = [0.0, -0.0, 1.0, -2.5, 0.1, 3.141592653589793, 1e-7, 6e-8, 65504.0, -448.0,
          1e30, float("nan"), float("inf"), float("-inf"), 1.0000001192092896, 2.0 ** -24]
INTS = {
    "i8": [0, 1, -1, 2 ** 24 + 1, -(2 ** 53) - 3, 2 ** 63 - 1, -(2 ** 63), 123456789012345],
    "i4": [0, 1, -1, 2 ** 24 + 1, 2 ** 31 - 1, -(2 ** 31), 16777217, -123456789],
    "i2": [0, 1, -1, 32767, -32768, 1234, -4321, 7],
    "i1": [0, 1, -1, 127, -128, 42, -42, 7],
    "u1": [0, 1, 127, 128, 255, 42, 200, 7],
    "b1": [True, False, True, True, False, False, True, False],
}


def bits(a):
    f = np.ascontiguousarray(np.asarray(a).astype(np.float32))
    return [int(x) for x in f.reshape(-1).view(np.uint32)]


def record(file, key, arr):
    expected.setdefault(file, {})[key] = {"shape": list(arr.shape), "f32_bits": bits(arr)}


def save(name, arr, version=None):
    path = os.path.join(OUT, name)
    if version is None:
        np.save(path, arr, allow_pickle=False)
    else:
        with open(path, "wb") as f:
            np.lib.format.write_array(f, arr, version=version, allow_pickle=False)
    record(name, name[:-4], arr)


# One file per dtype, little endian, C order, format 1.0
for code in ["f8", "f4", "f2"]:
    with np.errstate(over="ignore"):
        save("le_%s.npy" % code, np.array(FLOATS, dtype="<" + code))
for code, vals in INTS.items():
    order = "|" if code in ("i1", "u1", "b1") else "<"
    save("le_%s.npy" % code, np.array(vals, dtype=order + code))

# Big endian, every multi-byte dtype
for code in ["f8", "f4", "f2"]:
    with np.errstate(over="ignore"):
        save("be_%s.npy" % code, np.array(FLOATS, dtype=">" + code))
for code in ["i8", "i4", "i2"]:
    save("be_%s.npy" % code, np.array(INTS[code], dtype=">" + code))

# C and Fortran order, rank 2 and 3, both endians
base = np.arange(24, dtype=np.float64).reshape(2, 3, 4) * 0.5 - 3.0
save("c_order_234.npy", np.ascontiguousarray(base.astype("<f4")))
save("fortran_234_le.npy", np.asfortranarray(base.astype("<f4")))
save("fortran_234_be.npy", np.asfortranarray(base.astype(">f8")))
save("fortran_35_i2.npy", np.asfortranarray((np.arange(15).reshape(3, 5) - 7).astype("<i2")))

# Format versions 2.0 and 3.0, scalar and empty arrays
save("v2_f4.npy", np.arange(10, dtype="<f4").reshape(2, 5) / 8, version=(2, 0))
save("v3_f2_be.npy", (np.arange(6) - 2.5).reshape(3, 2).astype(">f2"), version=(3, 0))
save("scalar_f8.npy", np.array(2.718281828459045, dtype="<f8"))
save("empty_0x3_f4.npy", np.zeros((0, 3), dtype="<f4"))

# npz: stored and deflated, several members incl. Fortran order and big endian
members = {
    "weight": (np.arange(12, dtype=np.float32).reshape(3, 4) - 5.5) / 3,
    "bias": np.array([0.5, -0.25, 1e-3], dtype="<f2"),
    "layer.1/scale": np.asfortranarray((np.arange(6).reshape(2, 3) / 7).astype(">f8")),
    "count": np.array(INTS["i8"], dtype="<i8"),
}
for fname, fn in [("stored.npz", np.savez), ("deflated.npz", np.savez_compressed)]:
    fn(os.path.join(OUT, fname), **members)
    for k, v in members.items():
        record(fname, k, v)

# Refused by the reader: an object array (needs unpickling)
np.save(os.path.join(OUT, "object.npy"), np.array([1, "two", None], dtype=object), allow_pickle=True)

with open(os.path.join(OUT, "expected.json"), "w") as f:
    json.dump({"numpy": np.__version__, "files": expected}, f, indent=1, sort_keys=True)
    f.write("\n")
