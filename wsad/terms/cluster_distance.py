"""Cluster-distance regulariser with a batched k = 2 k-means."""
from __future__ import annotations

import numpy as np
import torch

from ..heads.base import unpack
from .base import TermInputs

@torch.no_grad()
def _lloyd(e: torch.Tensor, mask: torch.Tensor, n_init: int, n_iter: int, tol: float = 0.0,
           need_inertia: bool = True):
    """k = 2 Lloyd iterations on a padded block e [B, T, H] (zeros on padding).

    With centres c0, c1, segment x joins cluster 1 iff x.u > (||c1||^2 - ||c0||^2) / 2
    with u = c1 - c0, so an iteration is one batched matrix-vector product
    (x.u for every segment) and one batched sum (cluster 1's members;
    cluster 0 = bag total - cluster 1). Init 0 starts from the bag mean and
    the segment farthest from it; the other inits from random pairs of real
    segments (drawn from torch's generator). Each init stops when no
    assignment changes, or when every centre moved less than ``tol`` x the
    bag's mean per-dimension variance (squared), scikit-learn's rule for its
    ``tol``. The inertia of a partition with its means as centres is
    sum ||x||^2 - sum_k ||s_k||^2 / n_k (s_k: member sum), so it needs no extra pass.

    Runs in NumPy: the arrays here are small (a sketch, or a block of <= 2048
    segments), where NumPy's per-call cost is a fraction of torch's.
    """
    b, t, h = e.shape
    noise = torch.rand(n_init - 1, b, t).numpy() if n_init > 1 else None
    x, msk = e.numpy(), mask.numpy()
    m = msk.astype(x.dtype)
    n = np.maximum(m.sum(1), 1)[:, None]                            # [B, 1]
    total = np.matmul(m[:, None], x)[:, 0]                         # [B, H]
    mean = total / n
    rows = np.arange(b)
    sq = np.einsum("bth,bth->bt", x, x)
    far = np.where(msk, sq - 2 * np.matmul(x, mean[:, :, None])[..., 0], -np.inf).argmax(1)
    inits = [(mean, x[rows, far])]
    if noise is not None:
        # random pairs of distinct real segments: sort uniform noise, padding pushed last
        picks = np.where(msk[None], noise, 2.0).argsort(axis=2, kind="stable")
        for p, q in zip(picks[:, :, 0], picks[:, :, 1]):
            inits.append((x[rows, p], x[rows, np.where(msk.sum(1) > 1, q, p)]))
    limit = None
    if tol > 0:
        limit = tol * ((sq * m).sum(1) / n[:, 0] - (mean * mean).sum(1)) / h
    found = [_iterate(x, msk, n, total, c0, c1, n_iter, limit) for c0, c1 in inits]
    if not need_inertia and len(found) == 1:  # one init: nothing to choose between
        return torch.from_numpy(found[0]), None
    assign = np.stack(found, 2)                                      # [B, T, R]
    n1 = assign.sum(1).astype(np.float64)                            # [B, R]
    n0 = n.astype(np.float64) - n1
    s1 = np.matmul(assign.transpose(0, 2, 1).astype(x.dtype), x).astype(np.float64)  # [B, R, H]
    s0 = total.astype(np.float64)[:, None] - s1
    inertia = (sq.astype(np.float64) * m).sum(1)[:, None] \
        - (s1 * s1).sum(-1) / np.maximum(n1, 1) - (s0 * s0).sum(-1) / np.maximum(n0, 1)
    best = inertia.argmin(axis=1)
    return (torch.from_numpy(np.ascontiguousarray(assign[rows, :, best])),
            torch.from_numpy(inertia[rows, best]).to(e.dtype))


def _iterate(x, msk, n, total, c0, c1, n_iter: int, limit):
    """Lloyd iterations of :func:`_lloyd` from one pair of centres [B, H]; the
    final assignment [B, T] (bool)."""
    assign, padded = None, not msk.all()
    for _ in range(max(1, n_iter)):
        u = c1 - c0
        gap = 0.5 * np.einsum("bh,bh->b", c1 + c0, u)
        new = np.matmul(x, u[:, :, None])[..., 0] > gap[:, None]
        if padded:
            new &= msk
        if assign is not None and np.array_equal(new, assign):
            break
        assign = new
        if n_iter == 0:
            break
        w1 = new.astype(x.dtype)
        n1 = w1.sum(1)[:, None]
        n0 = n - n1
        s1 = np.matmul(w1[:, None], x)[:, 0]
        new1, new0 = s1 / np.maximum(n1, 1), (total - s1) / np.maximum(n0, 1)
        if not (n1 > 0).all() or not (n0 > 0).all():  # an empty cluster keeps its centre
            new1, new0 = np.where(n1 > 0, new1, c1), np.where(n0 > 0, new0, c0)
        settled = limit is not None and bool(
            (np.einsum("bh,bh->b", new1 - c1, new1 - c1) + np.einsum("bh,bh->b", new0 - c0, new0 - c0)
             <= limit).all())
        c0, c1 = new0, new1
        if settled:
            break
    return assign


def _bag_spans(mask: torch.Tensor, max_rows: int = 2048):
    """Consecutive bags grouped up to ``max_rows`` segments (at least one bag):
    (first bag, last bag + 1, first row, last row + 1). A block's product costs
    bags x rows, so a row budget keeps it near one pass whatever the lengths."""
    lengths = mask.sum(1).tolist()
    i, r0 = 0, 0
    while i < len(lengths):
        j, r1 = i + 1, r0 + lengths[i]
        while j < len(lengths) and r1 + lengths[j] <= max_rows:
            r1 += lengths[j]
            j += 1
        yield i, j, r0, r1
        i, r0 = j, r1


@torch.no_grad()
def two_means_packed(rows: torch.Tensor, mask: torch.Tensor, n_init: int = 4, n_iter: int = 30):
    """k = 2 k-means of every bag, from packed rows [N, H] (the real segments
    of bag 0, then bag 1, ...) and mask [B, T]. Returns (assign [N] bool:
    member of cluster 1, inertia [B]).

    Consecutive bags are clustered in blocks of <= 2048 segments, each padded
    only to its own longest bag, so the iterations run on data in the CPU
    cache and one long bag does not pad the whole batch. Within a block there
    is no Python loop over bags.
    """
    assign = torch.zeros(len(rows), dtype=torch.bool, device=rows.device)
    inertia = torch.zeros(len(mask), dtype=rows.dtype, device=rows.device)
    for i, j, r0, r1 in _bag_spans(mask):
        bmask = mask[i:j, :int(mask[i:j].sum(1).max())]
        a, inr = _lloyd(unpack(rows[r0:r1], bmask), bmask, n_init, n_iter)
        assign[r0:r1] = a[bmask]
        inertia[i:j] = inr
    return assign, inertia


@torch.no_grad()
def two_means(e: torch.Tensor, mask: torch.Tensor, n_init: int = 4, n_iter: int = 30):
    """Lloyd's k-means with k = 2 on every bag at once.

    e [B, T, H], mask [B, T]. Returns (assign [B, T] bool: member of cluster 1,
    inertia [B]: sum of squared distances to the nearest centre). Init 0 takes
    the real segment farthest from the bag mean and then the one farthest
    from it; the other inits take random pairs of real segments; the
    partition with the lowest inertia is kept.
    """
    assign, inertia = two_means_packed(e[mask], mask, n_init, n_iter)
    return unpack(assign, mask), inertia


def count_sketch(rows: torch.Tensor, dim: int) -> torch.Tensor:
    """[N, H] -> [N, dim]: coordinate i goes to bucket i mod dim, with sign +1
    in the first half of the units and -1 in the second (a count sketch;
    Charikar, Chen & Farach-Colton, ICALP 2002). Random signs make
    E||S x||^2 = ||x||^2; hidden units are exchangeable (randomly initialised,
    trained alike), so a fixed split acts as random signs would, up to a
    -1/(H/dim - 1) pairwise sign correlation within a bucket. k-means costs
    survive such sparse embeddings (Cohen et al., STOC 2015). Two folding
    sums in torch, no full-size temporary: one read of the rows, on torch's
    own threads (a NumPy/BLAS product here would start a second thread pool
    that spins against torch's on a 2-core machine)."""
    n, h = rows.shape
    if h % (2 * dim):
        raise ValueError(f"sketch_dim={dim}: twice it must divide the embedding width {h}")
    halves = rows.reshape(n, 2, h // (2 * dim), dim).sum(2)
    return halves[:, 0] - halves[:, 1]


@torch.no_grad()
def sketched_two_means(rows: torch.Tensor, mask: torch.Tensor, dim: int, n_init: int, n_iter: int,
                       tol: float = 1e-4, need_inertia: bool = True):
    """k = 2 k-means of every bag on a ``dim``-wide count sketch of the packed
    rows [N, H]: one pass over the embeddings, then Lloyd on data H/dim times
    smaller, all bags in one batch. Returns (assign [N] bool, sketch inertia [B]).
    ``dim`` <= 0, or one whose double does not divide H, clusters the full rows."""
    if dim <= 0 or 2 * dim > rows.shape[1] or rows.shape[1] % (2 * dim):
        return two_means_packed(rows, mask, n_init, n_iter)
    sk = count_sketch(rows, dim)
    lengths = mask.sum(1)
    if bool((lengths == mask.shape[1]).all()):  # equal lengths: the packed rows are the padded block
        a, inertia = _lloyd(sk.view(*mask.shape, dim), mask, n_init, n_iter, tol, need_inertia)
        return a.view(-1), inertia
    a, inertia = _lloyd(unpack(sk, mask), mask, n_init, n_iter, tol, need_inertia)
    return a[mask], inertia


class ClusterDistance:
    """Per bag, split the segment embeddings into two clusters by k-means (k = 2):
    d = || c_1 - c_0 ||, with c_k the mean of cluster k's members.
    L = mean over bags of [ d for normal bags; max(0, m - d) for anomalous bags ]:
    a normal video should form one tight group, an anomalous one two groups
    at least m apart. Assignments carry no gradient; the centres are means of
    their members, so gradients reach the embeddings. (A cluster-distance
    regulariser of the published kind; the exact form here is common practice.)

    ``sketch_dim``: the partition is found on a random sketch of that many
    dimensions (see :func:`sketched_two_means`; 0 = exact Lloyd on the full
    embeddings); d is always computed on the full embeddings. ``tol``: stop
    rule for the iterations, as scikit-learn's KMeans (0 = until no change).
    ``n_iter`` = 5: the partitions of ``benchmarks/cluster_term.py`` then hold
    1.1% more inertia than scikit-learn's (1.0% after 10 iterations, of which
    0.9% is the sketch's), at half the iterations' time.
    """

    def __init__(self, margin: float = 1.0, n_init: int = 1, n_iter: int = 5, sketch_dim: int = 32,
                 tol: float = 1e-4):
        self.margin, self.n_init, self.n_iter = float(margin), int(n_init), int(n_iter)
        self.sketch_dim, self.tol = int(sketch_dim), float(tol)

    def __call__(self, inp: TermInputs):
        rows, mask = inp.packed_embeddings, inp.mask      # rows [N, H]: real segments only
        assign, _ = sketched_two_means(rows.detach(), mask, self.sketch_dim, self.n_init, self.n_iter,
                                       self.tol, need_inertia=False)
        lengths = mask.sum(1)
        w1 = assign.to(rows.dtype)
        # c1 - c0 = sum_t coef_t x_t with coef = w1 / n1 - w0 / n0, per bag; computed as a
        # product of a [bags, rows] coefficient block with a contiguous slice of rows
        # (blocks of <= 2048 rows: no gather, no padding, and a cheap backward)
        if bool((lengths == mask.shape[1]).all()):  # equal lengths (e.g. chunked bags): one bmm
            b, t = mask.shape
            w = w1.view(b, t)
            n1 = w.sum(1)
            n0 = t - n1
            coef = w / n1.clamp(min=1)[:, None] - (1 - w) / n0.clamp(min=1)[:, None]
            diff = torch.bmm(coef[:, None], rows.view(b, t, -1))[:, 0]
        else:
            bag = torch.repeat_interleave(torch.arange(len(lengths), device=rows.device), lengths)
            n1 = torch.zeros(len(lengths), dtype=rows.dtype, device=rows.device).index_add(0, bag, w1)
            n0 = lengths.to(rows.dtype) - n1
            coef = w1 / n1.clamp(min=1)[bag] - (1 - w1) / n0.clamp(min=1)[bag]
            spans = list(_bag_spans(mask))
            # split, not slicing: its backward is one concatenation, not a zero-filled
            # full-size gradient per block
            parts = rows.split([r1 - r0 for _, _, r0, r1 in spans])
            diffs = []
            for (i, j, r0, r1), part in zip(spans, parts):
                block = torch.zeros(j - i, r1 - r0, dtype=rows.dtype, device=rows.device)
                block[bag[r0:r1] - i, torch.arange(r1 - r0, device=rows.device)] = coef[r0:r1]
                diffs.append(block @ part)
            diff = torch.cat(diffs)
        both = (n1 > 0) & (n0 > 0)
        d = torch.where(both, (diff ** 2).sum(-1).clamp(min=1e-12).sqrt(), torch.zeros_like(inp.y))
        loss = torch.where(inp.y > 0.5, torch.relu(self.margin - d), d)
        return loss.mean()
