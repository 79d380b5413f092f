"""k-means with k = 2 on every bag of a packed batch at once.

:func:`two_means` is the one public entry point: it validates its input once
and runs Lloyd's iterations (Lloyd 1982) on all bags together, optionally on a
count sketch of the rows (:func:`count_sketch`). The kernels below it assume
valid input.
"""
from __future__ import annotations

import numpy as np
import torch

from ..data.layout import bag_blocks, equal_lengths, unpack


@torch.no_grad()
def two_means(rows: torch.Tensor, mask: torch.Tensor, n_init: int = 1, n_iter: int = 5,
              tol: float = 1e-4, sketch_dim: int = 0, return_inertia: bool = True
              ) -> tuple[torch.Tensor, torch.Tensor | None]:
    """Partition each bag's segments into two clusters.

    Args:
        rows: [N, H] float rows of the real segments, bag 0 first (packed layout).
        mask: [B, T] bool, True = real segment; ``mask.sum() == N``.
        n_init: starts per bag; the first is the bag mean and the segment
            farthest from it, the others random pairs of the bag's segments
            (from torch's generator). The partition of lowest inertia is kept.
        n_iter: at most this many Lloyd iterations per start.
        tol: stop a start when every centre moved less than ``tol`` x the bag's
            mean per-dimension variance (squared distance), scikit-learn's rule
            for its ``tol``; 0 iterates until no assignment changes.
        sketch_dim: > 0 clusters a ``sketch_dim``-wide count sketch of the rows
            (H / sketch_dim times less data; the partition is found there) when
            twice it divides H; otherwise, or at 0, the full rows are clustered.
        return_inertia: False skips the inertia where nothing needs it.

    Returns:
        ``(assign, inertia)``: assign [N] bool (member of cluster 1), inertia
        [B] (sum of squared distances to the nearest centre, in the space that
        was clustered), or None when not asked for.
    """
    if rows.dim() != 2 or mask.dim() != 2 or mask.dtype != torch.bool:
        raise ValueError(f"two_means wants rows [N, H] and a bool mask [B, T]; got "
                         f"{tuple(rows.shape)} and {tuple(mask.shape)} {mask.dtype}")
    if int(mask.sum()) != len(rows):
        raise ValueError(f"two_means: the mask holds {int(mask.sum())} real segments, rows {len(rows)}")
    if int(n_init) < 1 or int(n_iter) < 0 or float(tol) < 0 or int(sketch_dim) < 0:
        raise ValueError(f"two_means: n_init={n_init} (>= 1), n_iter={n_iter} (>= 0), "
                         f"tol={tol} (>= 0), sketch_dim={sketch_dim} (>= 0)")
    n_init, n_iter, tol, dim = int(n_init), int(n_iter), float(tol), int(sketch_dim)
    h = rows.shape[1]
    if dim <= 0 or 2 * dim > h or h % (2 * dim):
        return _full(rows, mask, n_init, n_iter, tol, return_inertia)
    sk = count_sketch(rows, dim)
    if equal_lengths(mask):  # the packed rows are the padded block
        a, inertia = _lloyd(sk.view(*mask.shape, dim), mask, n_init, n_iter, tol, return_inertia)
        return a.view(-1), inertia
    a, inertia = _lloyd(unpack(sk, mask), mask, n_init, n_iter, tol, return_inertia)
    return a[mask], inertia


def _full(rows, mask, n_init: int, n_iter: int, tol: float, need_inertia: bool):
    """Lloyd on the full rows, consecutive bags in blocks of <= 2048 segments,
    each padded only to its own longest bag, so the iterations run on data in
    the CPU cache and one long bag does not pad the whole batch."""
    assign = torch.zeros(len(rows), dtype=torch.bool, device=rows.device)
    inertia = torch.zeros(len(mask), dtype=rows.dtype, device=rows.device) if need_inertia else None
    for i, j, r0, r1 in bag_blocks(mask):
        bmask = mask[i:j, :int(mask[i:j].sum(1).max())]
        a, inr = _lloyd(unpack(rows[r0:r1], bmask), bmask, n_init, n_iter, tol, need_inertia)
        assign[r0:r1] = a[bmask]
        if need_inertia:
            inertia[i:j] = inr
    return assign, inertia


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
