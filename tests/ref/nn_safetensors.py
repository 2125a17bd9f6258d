"""nn_safetensors.py — safetensors files written and read with struct + json only (the
safetensors Python package is not installed), as its format README describes: 8-byte
little-endian header length, JSON header (dtype, shape, data_offsets; __metadata__ strings),
raw little-endian tensors."""
import json
import struct

import numpy as np


def write(path, tensors, metadata):
    """tensors: list of (name, float32 array), written in this order."""
    header = {"__metadata__": {k: str(v) for k, v in metadata.items()}}
    offset = 0
    blobs = []
    for name, array in tensors:
        data = np.ascontiguousarray(array, dtype="<f4").tobytes()
        header[name] = {"dtype": "F32", "shape": list(array.shape),
                        "data_offsets": [offset, offset + len(data)]}
        offset += len(data)
        blobs.append(data)
    text = json.dumps(header).encode("utf-8")
    text += b" " * ((8 - len(text) % 8) % 8)
    with open(path, "wb") as f:
        f.write(struct.pack("<Q", len(text)))
        f.write(text)
        for blob in blobs:
            f.write(blob)


def read(path):
    """Returns ({name: float32 array}, metadata)."""
    with open(path, "rb") as f:
        raw = f.read()
    (n,) = struct.unpack("<Q", raw[:8])
    header = json.loads(raw[8:8 + n].decode("utf-8"))
    metadata = header.pop("__metadata__", {})
    data = raw[8 + n:]
    tensors = {}
    for name, info in header.items():
        assert info["dtype"] == "F32", info["dtype"]
        begin, end = info["data_offsets"]
        tensors[name] = np.frombuffer(data[begin:end], dtype="<f4").reshape(info["shape"]).copy()
    return tensors, metadata
