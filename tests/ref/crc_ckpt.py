"""Outside reference for tests/test_checkpoint.c: an independent reader of the
".ckpt" layout documented in train/loop/checkpoint_format.h, using Python's struct,
json and zlib modules.
usage: crc_ckpt.py FILE  → prints one line:
  CRC_OK NTENSORS NFLOATS PARAM_SUM ADAM_V_SUM STEP BEST_VAL LR_SCALE RANKS RUN_NAME
where CRC_OK is 1 when zlib.crc32 of everything before the trailing 4 bytes
equals them (little-endian), sums are float64 sums of the float32 values of
the tensors of kind 0 (parameters) and 3 (Adam second moments)."""
import json
import struct
import sys
import zlib

data = open(sys.argv[1], "rb").read()
assert data[:8] == b"NJCKPT01", "magic"
crc_ok = int(zlib.crc32(data[:-4]) & 0xFFFFFFFF == struct.unpack("<I", data[-4:])[0])
pos = 8
(clen,) = struct.unpack_from("<I", data, pos)
pos += 4
config = json.loads(data[pos:pos + clen].decode("utf-8"))
pos += clen
(slen,) = struct.unpack_from("<I", data, pos)
pos += 4
state = struct.unpack_from("<qqQQQqdqdQqiifi", data, pos)
assert slen == struct.calcsize("<qqQQQqdqdQqiifi") == 104, "state size"
pos += slen
(ntensors,) = struct.unpack_from("<I", data, pos)
pos += 4
table = []
for _ in range(ntensors):
    (nlen,) = struct.unpack_from("<B", data, pos)
    pos += 1
    name = data[pos:pos + nlen].decode("ascii")
    pos += nlen
    kind, group, n, c, h, w = struct.unpack_from("<BBIIII", data, pos)
    pos += 18
    table.append((name, kind, n * c * h * w))
sums = {0: 0.0, 3: 0.0}
nfloats = 0
for name, kind, count in table:
    values = struct.unpack_from("<%df" % count, data, pos)
    pos += 4 * count
    nfloats += count
    if kind in sums:
        sums[kind] += sum(values)
assert pos == len(data) - 4, "data length"
print(crc_ok, ntensors, nfloats, repr(sums[0]), repr(sums[3]), state[0], repr(state[6]), repr(state[13]),
      state[14], config["run"]["name"])
