"""Where a run stands: the epoch and batch reached, the selected model, the
history and the running sums of the epoch in progress. Saved after every
epoch (and at a graceful stop) so that a resumed run ends with the same scores."""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from omegaconf import DictConfig, OmegaConf

from .resume import rng_state, set_rng_state
from .selection import pick_epoch
from .setup import Setup


def _empty_sums(terms) -> dict:
    return {"sums": {name: 0.0 for name in terms}, "total": 0.0, "n_batches": 0}


@dataclass
class Progress:
    epoch: int = 1                      # the epoch to run next
    batch: int = 0                      # its first batch (non-zero only after a stop mid-epoch)
    best_value: float = -math.inf       # selection value of the selected epoch
    best_state: dict | None = None      # its model state dict
    best_epoch: int = 0
    history: list[dict] = field(default_factory=list)
    partial: dict = field(default_factory=dict)

    @classmethod
    def start(cls, s: Setup) -> Progress:
        return cls(partial=_empty_sums(s.terms))

    def add_step(self, loss: float, terms: dict[str, float]) -> None:
        for name, value in terms.items():
            self.partial["sums"][name] += value
        self.partial["total"] += loss
        self.partial["n_batches"] += 1

    def close_epoch(self, s: Setup) -> dict[str, float]:
        """The epoch's mean loss and term values; the sums start again."""
        n = max(1, self.partial["n_batches"])
        row = {"train_loss": self.partial["total"] / n,
               **{f"term/{k}": v / n for k, v in self.partial["sums"].items()}}
        self.partial = _empty_sums(s.terms)
        return row

    def record(self, epoch: int, row: dict, s: Setup, trainer: DictConfig) -> None:
        """Keep the epoch's row; keep its model when it is the best so far
        (``weak_val``: highest weak-validation video AUC, averaged over the last
        ``select_smooth`` epochs, from ``min_epoch`` on, ties to the later epoch;
        ``last``: every epoch replaces the one before)."""
        self.history.append({"epoch": epoch, **row})
        if trainer.select == "weak_val":   # the same rule as the epoch-count choice before a refit
            best, value = pick_epoch([r["weak_val_video_auc"] for r in self.history],
                                     int(trainer.select_smooth), int(trainer.min_epoch))
        else:
            best, value = epoch, epoch
        if best == epoch:
            self.best_value = value
            self.best_state = {n: v.clone() for n, v in s.model.state_dict().items()}
            self.best_epoch = epoch
        self.epoch, self.batch = epoch + 1, 0

    def snapshot(self, cfg: DictConfig | str, s: Setup, epoch: int | None = None, batch: int | None = None) -> dict:
        """Everything a resumed run needs, as plain data (loadable with weights_only). ``cfg``: the
        config, or its resolved YAML (the loop makes it once: ~12 ms, a tenth of a short epoch)."""
        text = cfg if isinstance(cfg, str) else OmegaConf.to_yaml(cfg, resolve=True)
        return {"config": text, "model": s.model.state_dict(),
                "optimizer": s.optimizer.state_dict(),
                "schedule": s.schedule.state_dict() if s.schedule is not None else None,
                "rng": rng_state(), "epoch": self.epoch if epoch is None else epoch,
                "batch": self.batch if batch is None else batch, "best_value": self.best_value,
                "best_state": self.best_state, "best_epoch": self.best_epoch,
                "history": self.history, "partial": self.partial}

    @classmethod
    def restore(cls, state: dict, s: Setup) -> Progress:
        """Put the model, optimiser, schedule and RNGs back where ``state`` left them."""
        s.model.load_state_dict(state["model"])
        s.optimizer.load_state_dict(state["optimizer"])
        if s.schedule is not None and state.get("schedule"):
            s.schedule.load_state_dict(state["schedule"])
        set_rng_state(state["rng"])
        return cls(state["epoch"], state["batch"], state["best_value"], state["best_state"],
                   state["best_epoch"], state["history"], state["partial"])
