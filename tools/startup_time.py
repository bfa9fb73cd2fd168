#!/usr/bin/python3
"""tools/startup_time.py — how long `train` takes to its first step, and its peak RSS.

usage: tools/startup_time.py DATASET.json [--cold] [--nightjar BIN] [--config FILE] [--threads N]

Runs `BIN train --config FILE --data DATASET.json --steps 1 --threads N` (default
./nightjar, configs/demo.json, 1 thread) in a scratch run folder and prints one line:
  first_step_s=S wall_s=W peak_rss_mib=R load=L data check: ...
first_step_s is from the start of the process to its "step 1 " line; the peak
RSS is the process's (wait4), which here is reached at step 1 and the validation
after it.  --cold gives the run an empty scan cache (XDG_CACHE_HOME in a fresh
temporary folder), so every frame is decoded as at a first start on new data;
without it the user's cache is used (a second run is a cached start).  Used
with tools/bigdata.py for the figures of DEVELOPERS.md "Large datasets"; the
machine's load average is printed because the 2-core VM is shared.
"""
import os
import subprocess
import sys
import tempfile
import time


def main(argv):
    args, opts = [], {"--nightjar": "./nightjar", "--config": "configs/demo.json", "--threads": "1"}
    cold, i = False, 0
    while i < len(argv):
        if argv[i] == "--cold":
            cold, i = True, i + 1
        elif argv[i] in opts and i + 1 < len(argv):
            opts[argv[i]], i = argv[i + 1], i + 2
        else:
            args, i = args + [argv[i]], i + 1
    if len(args) != 1:
        sys.exit(__doc__.split("\n\n")[1])
    with tempfile.TemporaryDirectory(prefix="nj_startup_") as tmp:
        env = dict(os.environ)
        if cold:
            env["XDG_CACHE_HOME"] = os.path.join(tmp, "cache")
        cmd = ["stdbuf", "-oL", opts["--nightjar"], "train", "--config", opts["--config"], "--data", args[0],
               "--out", os.path.join(tmp, "run"), "--steps", "1", "--threads", opts["--threads"]]
        t0 = time.monotonic()
        p = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=env)
        first, check, tail = None, "", []
        for line in p.stdout:
            if first is None and line.startswith("step 1 "):
                first = time.monotonic() - t0
            if "data check:" in line:
                check = line.strip()
            tail = (tail + [line])[-5:]
        _, status, ru = os.wait4(p.pid, 0)
        wall = time.monotonic() - t0
        if status != 0 or first is None:
            sys.exit("startup_time: the run failed:\n" + "".join(tail))
        print("first_step_s=%.1f wall_s=%.1f peak_rss_mib=%.1f load=%.2f %s"
              % (first, wall, ru.ru_maxrss / 1024.0, os.getloadavg()[0], check))


if __name__ == "__main__":
    main(sys.argv[1:])
