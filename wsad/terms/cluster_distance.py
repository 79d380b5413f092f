"""Cluster-distance regulariser with a batched k = 2 k-means."""
from __future__ import annotations

import torch

from .base import TermInputs


@torch.no_grad()
def two_means(e: torch.Tensor, mask: torch.Tensor, n_init: int = 4, n_iter: int = 30):
    """Lloyd's k-means with k = 2 on every bag at once.

    e [B, T, H], mask [B, T]. Returns (assign [B, T] bool: member of cluster 1,
    inertia [B]: sum of squared distances to the nearest centre). Init 0 takes
    the real segment farthest from the bag mean and then the one farthest
    from it; the other inits take random pairs of real segments; the
    partition with the lowest inertia is kept. No Python loop over bags.
    """
    b, t, h = e.shape
    m = mask.to(e.dtype)
    n = m.sum(dim=1).clamp(min=1)
    mean = (e * m[..., None]).sum(dim=1) / n[:, None]
    neg_inf = torch.finfo(e.dtype).min

    def farthest(ref):  # index of the real segment farthest from ref [B, H]
        d = ((e - ref[:, None, :]) ** 2).sum(-1)
        return d.masked_fill(~mask, neg_inf).argmax(dim=1)

    rows = torch.arange(b, device=e.device)
    i0 = farthest(mean)
    i1 = farthest(e[rows, i0])
    firsts, seconds = [i0], [i1]
    if n_init > 1:
        # random pairs of distinct real segments: sort uniform noise, padding pushed last
        noise = torch.rand(n_init - 1, b, t, device=e.device).masked_fill(~mask, 2.0)
        picks = noise.argsort(dim=2)
        firsts += list(picks[:, :, 0])
        seconds += list(torch.where(mask.sum(1) > 1, picks[:, :, 1], picks[:, :, 0]))
    r = len(firsts)
    E = e.repeat(r, 1, 1)                       # [R*B, T, H]
    M = mask.repeat(r, 1)
    Mf = M.to(e.dtype)
    rr = torch.arange(r * b, device=e.device)
    c0 = E[rr, torch.cat(firsts)]
    c1 = E[rr, torch.cat(seconds)]
    sq = (E ** 2).sum(-1)
    assign = torch.zeros_like(M)
    for _ in range(n_iter):
        d0 = sq - 2 * torch.einsum("bth,bh->bt", E, c0) + (c0 ** 2).sum(-1, keepdim=True)
        d1 = sq - 2 * torch.einsum("bth,bh->bt", E, c1) + (c1 ** 2).sum(-1, keepdim=True)
        new = (d1 < d0) & M
        if torch.equal(new, assign) and _ > 0:
            break
        assign = new
        w1 = assign.to(e.dtype)
        w0 = Mf - w1
        n0, n1 = w0.sum(1, keepdim=True), w1.sum(1, keepdim=True)
        c0 = torch.where(n0 > 0, torch.einsum("bt,bth->bh", w0, E) / n0.clamp(min=1), c0)
        c1 = torch.where(n1 > 0, torch.einsum("bt,bth->bh", w1, E) / n1.clamp(min=1), c1)
    d0 = ((E - c0[:, None]) ** 2).sum(-1)
    d1 = ((E - c1[:, None]) ** 2).sum(-1)
    inertia = (torch.minimum(d0, d1) * Mf).sum(1).view(r, b)
    best = inertia.argmin(dim=0)
    pick = best * b + torch.arange(b, device=e.device)
    return assign[pick], inertia[best, torch.arange(b, device=e.device)]


class ClusterDistance:
    """Per bag, split the segment embeddings into two clusters by k-means (k = 2):
    d = || c_1 - c_0 ||, with c_k the mean of cluster k's members.
    L = mean over bags of [ d for normal bags; max(0, m - d) for anomalous bags ]:
    a normal video should form one tight group, an anomalous one two groups
    at least m apart. Assignments carry no gradient; the centres are means of
    their members, so gradients reach the embeddings. (A cluster-distance
    regulariser of the published kind; the exact form here is common practice.)"""

    def __init__(self, margin: float = 1.0, n_init: int = 2, n_iter: int = 20):
        self.margin, self.n_init, self.n_iter = float(margin), int(n_init), int(n_iter)

    def __call__(self, inp: TermInputs):
        e, mask = inp.embeddings, inp.mask
        assign, _ = two_means(e.detach(), mask, self.n_init, self.n_iter)
        w1 = assign.to(e.dtype)
        w0 = mask.to(e.dtype) - w1
        c1 = torch.einsum("bt,bth->bh", w1, e) / w1.sum(1, keepdim=True).clamp(min=1)
        c0 = torch.einsum("bt,bth->bh", w0, e) / w0.sum(1, keepdim=True).clamp(min=1)
        both = (w1.sum(1) > 0) & (w0.sum(1) > 0)
        d = torch.where(both, ((c1 - c0) ** 2).sum(-1).clamp(min=1e-12).sqrt(), torch.zeros_like(inp.y))
        loss = torch.where(inp.y > 0.5, torch.relu(self.margin - d), d)
        return loss.mean()
