#!/usr/bin/env python3
"""tests/ref/torch_adam.py — torch.optim.Adam / AdamW on a quadratic loss.

Usage: /usr/bin/python3 tests/ref/torch_adam.py OUTDIR

Loss: 0.5 * sum_i a_i * (p_i - t_i)^2 over three float32 parameters:
  p1 (group 0, learning-rate multiplier 1), p2 (group 1, multiplier 0.5),
  p3 (group 2, frozen: not given to the optimizer, must stay unchanged).
Writes OUTDIR/meta.json (steps, parameters, groups, optimizer settings),
p0_<name>.npy, a_<name>.npy, t_<name>.npy, and for each optimizer setting
final_<setting>_<name>.npy: the parameters after `steps` updates, each step
being zero_grad, loss.backward(), optimizer.step().
"""
import json
import os
import sys

try:
    import numpy as np
    import torch
except ImportError as exc:
    sys.exit("torch_adam.py: cannot import %s (Debian packages python3-numpy and "
             "python3-torch are needed): %s" % (exc.name, exc))

STEPS = 20
PARAMS = [("p1", 0, (1, 3, 5, 7)), ("p2", 1, (4, 3, 1, 1)), ("p3", 2, (5, 1, 1, 1))]
GROUP_LR = [1.0, 0.5]
FROZEN = [2]
SETTINGS = [
    {"name": "adam", "lr": 0.05, "beta1": 0.9, "beta2": 0.999, "eps": 1e-8, "weight_decay": 0.0},
    {"name": "adamw", "lr": 0.05, "beta1": 0.8, "beta2": 0.99, "eps": 1e-6, "weight_decay": 0.1},
]


def run(setting, init, a, t):
    params = {name: torch.tensor(init[name], requires_grad=True) for name, _, _ in PARAMS}
    groups = [{"params": [params[name]], "lr": setting["lr"] * GROUP_LR[g]}
              for name, g, _ in PARAMS if g not in FROZEN]
    kw = dict(lr=setting["lr"], betas=(setting["beta1"], setting["beta2"]), eps=setting["eps"],
              weight_decay=setting["weight_decay"])
    opt = torch.optim.AdamW(groups, **kw) if setting["weight_decay"] > 0 else torch.optim.Adam(groups, **kw)
    for _ in range(STEPS):
        opt.zero_grad()
        loss = sum(0.5 * (torch.from_numpy(a[n]) * (params[n] - torch.from_numpy(t[n])) ** 2).sum()
                   for n, _, _ in PARAMS)
        loss.backward()
        opt.step()
    return {name: params[name].detach().numpy() for name, _, _ in PARAMS}


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: torch_adam.py OUTDIR")
    out = sys.argv[1]
    rng = np.random.default_rng(31)
    init, a, t = {}, {}, {}
    for name, _, shape in PARAMS:
        init[name] = rng.uniform(-1, 1, shape).astype(np.float32)
        a[name] = rng.uniform(0.5, 2.0, shape).astype(np.float32)
        # Targets at least 1.5 away: the gradient keeps its sign for all steps.
        away = rng.uniform(1.5, 3.0, shape) * rng.choice([-1.0, 1.0], shape)
        t[name] = (init[name] + away).astype(np.float32)
        for prefix, arr in (("p0_", init), ("a_", a), ("t_", t)):
            np.save(os.path.join(out, prefix + name + ".npy"), arr[name])
    for setting in SETTINGS:
        final = run(setting, init, a, t)
        for name, _, _ in PARAMS:
            np.save(os.path.join(out, "final_%s_%s.npy" % (setting["name"], name)), final[name])
    meta = {"steps": STEPS, "group_lr": GROUP_LR, "frozen": FROZEN, "settings": SETTINGS,
            "params": [{"name": n, "group": g, "shape": list(s)} for n, g, s in PARAMS]}
    with open(os.path.join(out, "meta.json"), "w") as f:
        json.dump(meta, f, indent=1)


if __name__ == "__main__":
    main()
