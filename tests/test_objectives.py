"""The objectives and heads added after the first three recipes, each against an
independent computation on a hand-made padded batch or an outside reference."""
from __future__ import annotations

import numpy as np
import pytest
import torch

from wsad.heads import HeadOutput
from wsad.heads.dilated import DilatedConvHead
from wsad.heads.self_attention import SelfAttentionHead, masked_self_attention, sinusoidal_positions
from wsad.terms import TermInputs
from wsad.terms.magnitude import MagnitudeSeparation
from wsad.terms.normal_centre import NormalCentre


def _padded_batch(seed=0, b=6, t=15, h=4):
    g = torch.Generator().manual_seed(seed)
    lengths = torch.tensor([15, 4, 9, 2, 12, 7])[:b]
    mask = torch.arange(t)[None] < lengths[:, None]
    logits = torch.randn(b, t, generator=g, dtype=torch.float64)
    emb = torch.randn(b, t, h, generator=g, dtype=torch.float64).abs() * 3 * mask[..., None]
    y = torch.tensor([1.0, 0.0, 1.0, 0.0, 1.0, 0.0], dtype=torch.float64)[:b]
    return TermInputs.of(HeadOutput(logits, emb, mask), y, None)


def test_magnitude_separation_matches_a_loop_over_bags():
    # Reference: the formula of Tian et al. (ICCV 2021) as explicit per-bag NumPy loops:
    # g_b = mean of the k largest ||h_bt|| over real t, c_b = mean score there,
    # L = mean_a max(0, m - g_a) + mean_n g_n + BCE(c, y).
    inp = _padded_batch()
    k, m = 3, 12.0
    s, msk, y, e = inp.scores.numpy(), inp.mask.numpy(), inp.y.numpy(), inp.embeddings.numpy()
    g, c = [], []
    for i in range(len(y)):
        norms = np.linalg.norm(e[i][msk[i]], axis=1)
        top = np.argsort(-norms, kind="stable")[:min(k, len(norms))]
        g.append(norms[top].mean())
        c.append(s[i][msk[i]][top].mean())
    g, c = np.array(g), np.array(c)
    bce = -np.mean(y * np.log(c) + (1 - y) * np.log(1 - c))
    ref = np.mean(np.maximum(0, m - g[y == 1])) + np.mean(g[y == 0]) + bce
    assert MagnitudeSeparation(k=k, margin=m)(inp).item() == pytest.approx(ref, rel=1e-10)
    # padding with large embeddings never gets selected
    big = inp.out.embeddings.clone()
    big[~inp.mask] = 1e6
    padded = TermInputs.of(HeadOutput(inp.logits, big, inp.mask), inp.y, None)
    assert MagnitudeSeparation(k=k, margin=m)(padded).item() == pytest.approx(ref, rel=1e-10)


def test_normal_centre_is_the_variance_within_normal_bags():
    # Reference: numpy.var (ddof=0) of each normal bag's real scores (Wan et al., ICME 2020).
    inp = _padded_batch(1)
    s, msk, y = inp.scores.numpy(), inp.mask.numpy(), inp.y.numpy()
    ref = np.mean([np.var(s[i][msk[i]]) for i in range(len(y)) if y[i] == 0])
    assert NormalCentre()(inp).item() == pytest.approx(ref, rel=1e-10)


def test_masked_self_attention_matches_torch_multihead_attention():
    # Reference: torch.nn.MultiheadAttention with the same weights and key_padding_mask.
    torch.manual_seed(0)
    e, heads = 8, 2
    mha = torch.nn.MultiheadAttention(e, heads, batch_first=True)
    h = torch.randn(3, 10, e)
    mask = torch.arange(10)[None] < torch.tensor([10, 6, 3])[:, None]
    ref, _ = mha(h, h, h, key_padding_mask=~mask, need_weights=False)
    got = masked_self_attention(h, mask, mha.in_proj_weight, mha.in_proj_bias, mha.out_proj.weight,
                                mha.out_proj.bias, heads)
    torch.testing.assert_close(got[mask], ref[mask])


def test_sinusoidal_positions_follow_the_formula():
    # Reference: Vaswani et al. (2017), PE(t, 2i) = sin(t / 10000^(2i/d)), PE(t, 2i+1) = cos(...).
    pe = sinusoidal_positions(7, 6)
    for t in range(7):
        for i in range(3):
            assert pe[t, 2 * i].item() == pytest.approx(np.sin(t / 10000 ** (2 * i / 6)), abs=1e-6)
            assert pe[t, 2 * i + 1].item() == pytest.approx(np.cos(t / 10000 ** (2 * i / 6)), abs=1e-6)


@pytest.mark.parametrize("head", [SelfAttentionHead(8, [16, 4], 4, 32, 0.0),
                                  SelfAttentionHead(8, [16, 4], 4, 32, 0.0, positions="sinusoidal"),
                                  DilatedConvHead(8, [16, 4], (1, 2, 4), 0.0)])
def test_new_heads_ignore_padding(head):
    torch.manual_seed(0)
    x = torch.randn(3, 12, 8)
    mask = torch.arange(12)[None] < torch.tensor([12, 7, 4])[:, None]
    garbage = torch.where(mask[..., None], x, torch.full_like(x, 9.0))
    head.eval()
    a, b = head(x, mask), head(garbage, mask)
    torch.testing.assert_close(a.logits[mask], b.logits[mask])
    torch.testing.assert_close(a.packed_embeddings, b.packed_embeddings)
    # and a bag alone scores as it does among others (no leak between bags)
    alone = head(x[1:2, :7], mask[1:2, :7])
    torch.testing.assert_close(alone.logits[0], a.logits[1, :7])


def test_dilated_head_matches_explicit_sums():
    # Reference: h_t = ReLU(sum_r sum_j W_{r,j} x_{t + (j - 1) r} + b_r), written with NumPy loops.
    torch.manual_seed(2)
    head = DilatedConvHead(3, [5, 2], (1, 2), 0.0).eval()
    x = torch.randn(1, 9, 3)
    mask = torch.ones(1, 9, dtype=torch.bool)
    got = head(x, mask).embeddings[0].detach().numpy()
    xs = x[0].numpy()
    ref = np.zeros((9, 5))
    for conv in head.convs:
        w, bias, r = conv.weight.detach().numpy(), conv.bias.detach().numpy(), conv.dilation[0]
        for t in range(9):
            acc = bias.copy()
            for j in range(3):
                u = t + (j - 1) * r
                if 0 <= u < 9:
                    acc += w[:, :, j] @ xs[u]
            ref[t] += acc
    np.testing.assert_allclose(got, np.maximum(ref, 0), rtol=1e-5, atol=1e-6)


def _train(store, tmp_path, recipe, *extra):
    from wsad.config import compose_config
    from wsad.train import train

    return train(compose_config([f"data.root={store}", "trainer.members=1", f"recipe={recipe}", "seed=0",
                                 "tracking.enabled=false", "trainer.progress=false", "trainer.bootstrap=200",
                                 f"trainer.out_dir={tmp_path}", *extra]))


@pytest.mark.slow   # about 12 s on the invented scenario; make test checks the recipe learning on the digits stream
def test_magnitude_recipe_separates_feature_magnitudes(demo_store, tmp_path):
    # What the objective asks for, measured on held-out test videos: the k largest embedding
    # norms of anomalous videos end above those of normal videos (Tian et al., ICCV 2021).
    from wsad.checkpoint import load_checkpoint, model_from_checkpoint
    from wsad.store import FeatureStore

    res = _train(demo_store, tmp_path, "magnitude")
    assert "term/magnitude" in res.history.columns
    model, _, std = model_from_checkpoint(load_checkpoint(tmp_path / "model" / "checkpoint.pt"))
    store = FeatureStore(demo_store)
    top = {0: [], 1: []}
    with torch.no_grad():
        for v in store.videos("test"):
            norms = model.embed(torch.from_numpy(std(store.views(v))[0])).norm(dim=1)
            top[store.label(v)].append(norms.topk(min(3, len(norms))).values.mean().item())
    assert np.mean(top[1]) > np.mean(top[0]), top
