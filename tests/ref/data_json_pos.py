"""Outside reference for tests/test_data_check.c: where Python's json module
places a syntax error.  usage: data_json_pos.py FILE  → prints "LINE COL"."""
import json
import sys

try:
    with open(sys.argv[1]) as f:
        json.load(f)
    print("0 0")
except json.JSONDecodeError as e:
    print(e.lineno, e.colno)
