"""Writes the seed corpus of ReaderFuzzTest (small valid and near-valid files). Run from this folder."""
import io, json, os, struct, zipfile

def st(header, data=b""):
    h = json.dumps(header).encode()
    return struct.pack("<Q", len(h)) + h + data

def npy(descr, shape, data):
    h = "{'descr': '%s', 'fortran_order': False, 'shape': %s, }" % (descr, repr(tuple(shape)))
    h = h.encode() + b" " * ((64 - (10 + len(h) + 1) % 64) % 64) + b"\n"
    return b"\x93NUMPY\x01\x00" + struct.pack("<H", len(h)) + h + data

def npz(members, deflate):
    b = io.BytesIO()
    with zipfile.ZipFile(b, "w", zipfile.ZIP_DEFLATED if deflate else zipfile.ZIP_STORED) as z:
        for n, c in members.items():
            z.writestr(n, c)
    return b.getvalue()

def put(method, name, content):
    os.makedirs(os.path.join("ReaderFuzzTestInputs", method), exist_ok=True)
    with open(os.path.join("ReaderFuzzTestInputs", method, name), "wb") as f:
        f.write(content)

f2 = struct.pack("<2f", 1.0, 2.0)
put("safetensors", "valid_f32", st({"w": {"dtype": "F32", "shape": [2], "data_offsets": [0, 8]}}, f2))
put("safetensors", "valid_meta_bf16", st({"__metadata__": {"k": "v"},
    "b": {"dtype": "BF16", "shape": [1, 2], "data_offsets": [0, 4]}}, b"\x80\x3f\x00\x40"))
put("safetensors", "offsets_beyond", st({"w": {"dtype": "F32", "shape": [2], "data_offsets": [0, 80]}}, f2))
put("shardedIndex", "valid", json.dumps({"metadata": {}, "weight_map": {"w": "a.safetensors"}}).encode())
put("shardedIndex", "missing_shard", json.dumps({"weight_map": {"w": "b.safetensors"}}).encode())
v = npy("<f4", [2], f2)
put("npy", "valid_f4", v)
put("npy", "valid_f8_2d", npy("<f8", [1, 2], struct.pack("<2d", 1.0, 2.0)))
put("npy", "object_array", npy("|O", [1], b"\x80\x04N."))
put("npz", "stored", npz({"w.npy": v}, False))
put("npz", "deflated", npz({"w.npy": v, "b.npy": npy("<i4", [1], b"\x01\x00\x00\x00")}, True))
