"""The batched k = 2 cluster-distance term against scikit-learn's KMeans.

Embeddings: the first hidden layer (512 wide) of an untrained MLP head over
64 videos x 250 segments of the benchmark store, as the term sees them in a
training step. ``speedup_vs_sklearn`` = time of ``KMeans(n_clusters=2)``
fitted per video (scikit-learn's defaults) / time of the term's forward
pass on all 64 bags at once (its clustering included). ``inertia_ratio``
checks that the speed is not bought with worse partitions (ours / sklearn's
summed within-cluster squared distances; 1.0 = as tight).

``step_share`` = (step with the term - step without) / step with, on a
batch of 16 anomalous + 16 normal whole videos with the top-k recipe.

    python benchmarks/cluster_term.py [tiny|quick|full]
"""
from __future__ import annotations

import numpy as np
import torch
from _common import best_of, emit, size_arg, store

SHAPE = {"tiny": (8, 40, 32), "quick": (64, 250, 512), "full": (64, 250, 512)}


def embeddings(root, videos: int, segments: int, width: int) -> torch.Tensor:
    from wsad.heads import MLPHead
    from wsad.store import FeatureStore

    st = FeatureStore(root)
    long_enough = [v for v in st.videos("train") if st.n_segments(v) >= segments][:videos]
    if len(long_enough) < videos:
        raise SystemExit(f"the store has only {len(long_enough)} videos of >= {segments} segments")
    x = torch.from_numpy(np.stack([st.views(v)[0][:segments] for v in long_enough]))
    torch.manual_seed(0)
    head = MLPHead(st.dim, hidden=(width, 32))
    with torch.no_grad():
        return head.embed(x)


def full_inertia(e: torch.Tensor, assign: torch.Tensor) -> torch.Tensor:
    """Sum of squared distances of each segment to its cluster's mean, per bag (float64)."""
    e = e.double()
    out = torch.zeros(len(e), dtype=torch.float64)
    for k in (False, True):
        w = (assign == k).double()
        c = (w[..., None] * e).sum(1) / w.sum(1, keepdim=True).clamp(min=1)
        out += (w * ((e - c[:, None]) ** 2).sum(-1)).sum(1)
    return out


def step_share(root) -> dict:
    from wsad.config import compose_config
    from wsad.train import build, seed_everything
    from wsad.train.step import step

    cfg = compose_config([f"data.root={root}", "recipe=topk", "tracking.enabled=false",
                          "objective.cluster_distance=1e-3"])
    seed_everything(0, None)
    s = build(cfg)
    batch = s.loader.collate([s.items[i] for i in s.bags.batches(s.items, 1, 0)[0]])

    without_term = {n: t for n, t in s.terms.items() if n != "cluster_distance"}
    with_t, without = [], []
    for _ in range(12):  # interleaved, so drifts in machine speed hit both alike
        with_t.append(best_of(lambda: step(s.model, s.pooling, s.terms, batch, s.optimizer), 1))
        without.append(best_of(lambda: step(s.model, s.pooling, without_term, batch, s.optimizer), 1))
    w, wo = min(with_t), min(without)
    return {"step_share": max(0.0, (w - wo) / w), "step_s_with": w, "step_s_without": wo,
            "step_segments": int(batch.mask.sum())}


def run(size: str) -> dict:
    from sklearn.cluster import KMeans

    from wsad.cluster import two_means
    from wsad.heads import HeadOutput
    from wsad.terms import TermInputs
    from wsad.terms.cluster_distance import ClusterDistance

    root = store(size)
    b, t, h = SHAPE[size]
    e = embeddings(root, b, t, h)
    mask = torch.ones(b, t, dtype=torch.bool)
    y = (torch.arange(b) % 2).float()
    term = ClusterDistance()
    inp = TermInputs(HeadOutput(torch.zeros(b, t), e, mask), None, y)
    term(inp)
    ours = best_of(lambda: term(inp), 10)
    arr = e.numpy()  # the same float32 data the term clusters

    def sklearn_all():
        return [KMeans(n_clusters=2, random_state=0).fit(arr[i]).inertia_ for i in range(b)]

    ref_inertia = np.array(sklearn_all())
    sk = best_of(sklearn_all, 3)
    # the term's own partition (found on the sketch), scored on the full embeddings
    assign, _ = two_means(e.reshape(-1, h), mask, term.n_init, term.n_iter, term.tol, term.sketch_dim)
    inertia = full_inertia(e, assign.view(b, t))
    return {"cluster_term": {
        "speedup_vs_sklearn": sk / ours, "term_s": ours, "sklearn_s": sk,
        "inertia_ratio": float(inertia.double().sum() / ref_inertia.sum()),
        "shape": [b, t, h], **step_share(root)}}


if __name__ == "__main__":
    emit(run(size_arg()))
