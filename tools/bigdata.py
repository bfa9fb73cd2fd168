#!/usr/bin/python3
"""tools/bigdata.py — a large dataset made cheaply from a few hundred real frames.

usage: tools/bigdata.py OUT SEQUENCES FRAMES [--base DIR] [--nightjar BIN]

Writes OUT/dataset.json with SEQUENCES sequences of FRAMES frames each; every
frame OUT/seq-NNNN/cam0/NNNNNN.png is a symbolic link to one of the real frames
of BASE (a `nightjar synth` output: default OUT/base, rendered when missing by
`BIN synth --seed 5 --sequences 3 --frames 200 --fleet`, 320x240, ~40 s).
Sequence s, frame i links to real frame (s * 997 + i) mod (real frame count),
in the base's order, so neighbouring frames are neighbouring real frames
(stops, turns and noise included) and sequences start at different places.
The last sequence is "test", the one before "val", the rest "train".  Used to
measure startup time and memory for 1k / 10k / 100k frames (DEVELOPERS.md,
"Large datasets"); runs in a few seconds for 100,000 links.
"""
import json
import os
import subprocess
import sys


def main(argv):
    args, base, binary = [], None, "./nightjar"
    i = 0
    while i < len(argv):
        if argv[i] == "--base":
            base = argv[i + 1]
            i += 2
        elif argv[i] == "--nightjar":
            binary = argv[i + 1]
            i += 2
        else:
            args.append(argv[i])
            i += 1
    if len(args) != 3:
        sys.exit(__doc__.split("\n\n")[1])
    out, nseq, nframes = args[0], int(args[1]), int(args[2])
    base = os.path.abspath(base or os.path.join(out, "base"))
    if not os.path.exists(os.path.join(base, "dataset.json")):
        subprocess.run([binary, "synth", "--out", base, "--seed", "5", "--sequences", "3",
                        "--frames", "200", "--fleet"], check=True, stdout=subprocess.DEVNULL)
    with open(os.path.join(base, "dataset.json")) as f:
        desc = json.load(f)
    real = []
    for s in desc["sequences"]:
        d = os.path.join(base, s["images"])
        real += [os.path.join(d, n) for n in sorted(os.listdir(d)) if n.endswith(".png")]
    camera = desc["sequences"][0]["camera"]
    seqs = []
    for s in range(nseq):
        name = "seq-%04d" % s
        cam0 = os.path.join(out, name, "cam0")
        os.makedirs(cam0, exist_ok=True)
        for i in range(nframes):
            link = os.path.join(cam0, "%06d.png" % i)
            if not os.path.lexists(link):
                os.symlink(real[(s * 997 + i) % len(real)], link)
        split = "test" if s == nseq - 1 and nseq > 2 else "val" if s == nseq - 2 and nseq > 2 else "train"
        seqs.append({"name": name, "images": name + "/cam0", "camera": camera, "split": split})
    with open(os.path.join(out, "dataset.json"), "w") as f:
        json.dump({"sequences": seqs}, f, indent=1)
    print("bigdata: %s: %d sequences x %d frames = %d links to %d real frames in %s"
          % (out, nseq, nframes, nseq * nframes, len(real), base))


if __name__ == "__main__":
    main(sys.argv[1:])
