"""Outside reference for tests/test_checkpoint.c: CRC-32 by Python's zlib.
usage: crc_zlib.py FILE...  → prints one line per file, the zlib.crc32 of all
its bytes as 8 hex digits."""
import sys
import zlib

for name in sys.argv[1:]:
    with open(name, "rb") as f:
        print("%08x" % (zlib.crc32(f.read()) & 0xFFFFFFFF))
