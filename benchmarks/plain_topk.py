"""The plain script a researcher writes instead of wsad: top-k MIL on a feature store's
.npy files, read per batch, padded, a 512-32-1 head with dropout 0.6, masked top-k mean
(k = T // 16 + 1), BCE, Adam, 2 threads; with --cluster a k = 2 KMeans (scikit-learn,
n_init=3) on each video's first-layer embeddings at every step; one frame-AUC evaluation at
the end. ``plain_vs_wsad.py`` times it beside ``wsad-train``; nothing of wsad is imported.

    python benchmarks/plain_topk.py STORE EPOCHS [--cluster]
"""
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import torch
from sklearn.cluster import KMeans
from sklearn.metrics import roc_auc_score

started = time.perf_counter()
torch.set_num_threads(2)
torch.manual_seed(0)
root, epochs, cluster = Path(sys.argv[1]), int(sys.argv[2]), "--cluster" in sys.argv
man = pd.read_csv(root / "manifest.csv")
train, test = man[man.split == "train"], man[man.split == "test"]
load = lambda f: torch.from_numpy(np.load(root / f).astype(np.float32))  # noqa: E731
head = torch.nn.Sequential(torch.nn.Linear(int(np.load(root / man.file[0]).shape[-1]), 512), torch.nn.ReLU(),
                           torch.nn.Dropout(0.6), torch.nn.Linear(512, 32), torch.nn.ReLU(), torch.nn.Dropout(0.6),
                           torch.nn.Linear(32, 1), torch.nn.Sigmoid())
opt = torch.optim.Adam(head.parameters(), lr=1e-3, weight_decay=5e-4)
rng = np.random.default_rng(0)
for epoch in range(epochs):
    order = rng.permutation(len(train))
    for start in range(0, len(order), 32):
        rows = train.iloc[order[start:start + 32]]
        feats = [load(f) for f in rows.file]
        x = torch.nn.utils.rnn.pad_sequence(feats, batch_first=True)
        lengths = torch.tensor([len(f) for f in feats])
        mask = torch.arange(x.shape[1])[None] < lengths[:, None]
        hidden = head[:2](x)
        s = head[2:](hidden).squeeze(-1).masked_fill(~mask, -1.0)
        top = s.sort(dim=1, descending=True).values
        k = lengths // 16 + 1
        keep = torch.arange(x.shape[1])[None] < k[:, None]
        bag = (top * keep).sum(1) / k
        y = torch.tensor(rows.label.values, dtype=torch.float32)
        loss = torch.nn.functional.binary_cross_entropy(bag.clamp(1e-6, 1 - 1e-6), y)
        if cluster:
            gaps = []
            for i, n in enumerate(lengths.tolist()):
                e = hidden[i, :n]
                a = torch.from_numpy(KMeans(2, n_init=3).fit(e.detach().numpy()).labels_ == 1)
                gap = e[a].mean(0) - e[~a].mean(0) if 0 < a.sum() < n else torch.zeros(e.shape[1])
                gaps.append(gap.norm())
            gaps = torch.stack(gaps)
            loss = loss + 1e-3 * torch.where(y > 0, torch.relu(1.0 - gaps), gaps).mean()
        opt.zero_grad()
        loss.backward()
        opt.step()
head.eval()
events = pd.read_csv(root / "events.csv")
scores, labels = [], []
with torch.no_grad():
    for row in test.itertuples():
        s = head(load(row.file)).squeeze(-1).numpy()
        frames = s[np.minimum(np.arange(row.frames) // 16, len(s) - 1)]
        truth = np.zeros(row.frames, dtype=bool)
        for e in events[events.video == row.video].itertuples():
            truth[e.start:e.end] = True
        scores.append(frames)
        labels.append(truth)
auc = roc_auc_score(np.concatenate(labels), np.concatenate(scores))
print(f"frame AUC {auc:.4f}, {time.perf_counter() - started:.1f} s after imports")
