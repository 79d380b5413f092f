"""One training epoch of each recipe against its compute floor.

The floor is the time of the same head's matrix products (forward and
backward through its chain of linear layers) over the same number of
segments, in the same batch sizes, as dense tensors already in memory:
what an epoch would cost with reading, preparing, pooling, the loss terms
and the optimiser all free. ``ratio_to_floor`` = warm epoch / floor (the
fastest of the epochs after the first, the least disturbed on a noisy
machine, against the fastest of repeated floor measurements); the first
epoch (cold: reads and prepares every bag) is reported beside it.

    python benchmarks/train_floor.py [tiny|quick|full] [recipe,recipe,...]
"""
from __future__ import annotations

import tempfile
import time

import pandas as pd
import torch
from _common import best_of, emit, size_arg, store
from torch import nn
from torch.nn import functional as F

RECIPES = ("topk", "windows", "mil_ranking")
EPOCHS = 4


def linear_chain(model: nn.Module, dim: int) -> list[nn.Linear]:
    """The head's linear layers from the input onwards (each takes the last one's output)."""
    chain, width = [], dim
    for m in model.modules():
        if isinstance(m, nn.Linear) and m.in_features == width:
            chain.append(m)
            width = m.out_features
    if not chain:
        raise SystemExit("the head has no linear layer on the input; the floor needs one")
    return chain


def floor_seconds(chain: list[nn.Linear], segments: int, batches: int, dim: int) -> float:
    """Forward + backward matrix products over ``segments`` rows in ``batches`` batches."""
    rows = max(1, segments // batches)
    x = torch.randn(rows, dim)
    params = [(m.weight.detach().clone().requires_grad_(), m.bias.detach().clone().requires_grad_()
               if m.bias is not None else None) for m in chain]
    last = segments - rows * (batches - 1)
    x_last = torch.randn(max(1, last), dim)

    def epoch():
        for b in range(batches):
            h = x_last if b == batches - 1 else x
            for w, bias in params:
                h = F.linear(h, w, bias)
            h.sum().backward()

    epoch()  # warm-up: first calls allocate
    return best_of(epoch, 3)


def run(size: str, recipes=RECIPES) -> dict:
    from wsad.checkpoint import build_head
    from wsad.config import compose_config
    from wsad.store import FeatureStore
    from wsad.train import train

    root = store(size)
    dim = FeatureStore(root).dim
    per_recipe = {}
    for recipe in recipes:
        with tempfile.TemporaryDirectory() as out:
            cfg = compose_config([f"data.root={root}", f"recipe={recipe}", f"trainer.epochs={EPOCHS}",
                                  "trainer.eval_every=1000", "trainer.bootstrap=0",
                                  "trainer.select=last", "trainer.weak_val_share=0.2",
                                  "tracking.enabled=false", "trainer.progress=false",
                                  f"trainer.out_dir={out}"])
            t = time.perf_counter()
            train(cfg)
            run_s = time.perf_counter() - t
            hist = pd.read_csv(f"{out}/scores/history.csv")
        cold = hist.iloc[0]
        warm = hist.iloc[1:].sort_values("time/train_s").iloc[0]
        chain = linear_chain(build_head(cfg, dim), dim)
        floor = floor_seconds(chain, int(warm["train_segments"]), int(warm["train_batches"]), dim)
        per_recipe[recipe] = {
            "epoch_s": float(warm["time/train_s"]), "cold_epoch_s": float(cold["time/train_s"]),
            "floor_s": floor, "ratio_to_floor": float(warm["time/train_s"]) / floor,
            "cold_ratio_to_floor": float(cold["time/train_s"]) / floor,
            "segments": int(warm["train_segments"]), "batches": int(warm["train_batches"]),
            "eval_s_per_epoch": float(warm["time/eval_s"]), "run_s": run_s,
            "torch_threads": torch.get_num_threads()}
    worst = max(per_recipe, key=lambda r: per_recipe[r]["ratio_to_floor"])
    return {"train": {"ratio_to_floor": per_recipe[worst]["ratio_to_floor"], "worst_recipe": worst,
                      "recipes": per_recipe}}


if __name__ == "__main__":
    import sys

    emit(run(size_arg(), sys.argv[2].split(",") if len(sys.argv) > 2 else RECIPES))
