"""One optimisation step: forward, pool, the weighted terms, backward, update."""
from __future__ import annotations

from dataclasses import dataclass

import torch

from ..data.batch import Batch
from ..pooling.modules import Pooling
from ..terms.base import Term, TermInputs


@dataclass
class StepResult:
    loss: float                 # the weighted objective of the batch
    terms: dict[str, float]     # each term's unweighted value


def objective(model: torch.nn.Module, pooling: Pooling, terms: dict[str, tuple[float, Term]],
              batch: Batch) -> tuple[torch.Tensor, dict[str, float]]:
    """L = sum_j w_j L_j(batch) and each L_j, without touching the gradients."""
    out = model(batch.x, batch.mask)
    inp = TermInputs.of(out, batch.y, pooling(out, batch.mask), batch.pairs, batch.targets)
    loss, values = 0.0, {}
    for name, (w, term) in terms.items():
        value = term(inp)
        values[name] = float(value.detach())
        loss = loss + w * value
    return loss, values


def step(model: torch.nn.Module, pooling: Pooling, terms: dict[str, tuple[float, Term]],
         batch: Batch, optimizer: torch.optim.Optimizer, grad_clip: float | None = None) -> StepResult:
    """One update of ``model`` on ``batch``; the model must be in training mode."""
    loss, values = objective(model, pooling, terms, batch)
    optimizer.zero_grad(set_to_none=True)
    loss.backward()
    if grad_clip:
        torch.nn.utils.clip_grad_norm_(model.parameters(), float(grad_clip))
    optimizer.step()
    return StepResult(float(loss.detach()), values)
