"""Bag constructions: coverage, order, balance, chunking, standardisation."""
from __future__ import annotations

import numpy as np
import pytest

from wsad.bags import AnomalousNormalPairs, WholeVideo, Windows
from wsad.data import ArrayCache, BagLoader, Standardizer, resample_chunks
from wsad.errors import WsadError
from wsad.store import FeatureStore


@pytest.fixture(scope="module")
def store(small_store):
    return FeatureStore(small_store)


@pytest.mark.parametrize("size,stride", [(8, 8), (8, 3), (32, 32), (500, 10)])
def test_windows_cover_every_segment(store, size, stride):
    bags = Windows(size=size, stride=stride)
    videos = store.videos("train")
    items = bags.items(store, videos)
    for v in videos:
        t = store.n_segments(v)
        covered = np.zeros(t, bool)
        for it in items:
            if it.video == v:
                assert it.length == min(size, t) and 0 <= it.start and it.start + it.length <= t
                covered[it.start:it.start + it.length] = True
        assert covered.all()


@pytest.mark.parametrize("order", ["sequential", "shuffled"])
def test_every_window_once_per_epoch(store, order):
    bags = Windows(size=8, order=order, batch_size=7)
    items = bags.items(store, store.videos("train"))
    for epoch in (1, 2):
        seen = [i for b in bags.batches(items, epoch, seed=0) for i in b]
        assert sorted(seen) == list(range(len(items)))


def test_sequential_is_manifest_then_time_and_shuffled_reshuffles(store):
    videos = store.videos("train")
    seq = Windows(size=8, order="sequential")
    items = seq.items(store, videos)
    flat = [items[i] for b in seq.batches(items, 1, 0) for i in b]
    keys = [(videos.index(it.video), it.start) for it in flat]
    assert keys == sorted(keys)
    shuf = Windows(size=8, order="shuffled")
    e1 = [i for b in shuf.batches(items, 1, 0) for i in b]
    e2 = [i for b in shuf.batches(items, 2, 0) for i in b]
    assert e1 != e2 and e1 != sorted(e1)
    assert e1 == [i for b in shuf.batches(items, 1, 0) for i in b]  # seeded


def test_balanced_batches_and_pairs(store):
    videos = store.videos("train")
    whole = WholeVideo(per_class=4)
    items = whole.items(store, videos)
    n_pos = sum(it.label for it in items)
    n_neg = len(items) - n_pos
    batches = whole.batches(items, 1, 0)
    for b in batches:
        labels = [items[i].label for i in b]
        assert labels == [1] * 4 + [0] * 4
    larger = 1 if n_pos >= n_neg else 0
    seen = {i for b in batches for i in b if items[i].label == larger}
    assert seen == {i for i, it in enumerate(items) if it.label == larger}
    pairs = AnomalousNormalPairs(per_class=3)
    loader = BagLoader(store, pairs, Standardizer())
    pair_items = pairs.items(store, videos)
    batch = loader.collate([pair_items[i] for i in pairs.batches(pair_items, 1, 0)[0]])
    assert batch.mask.shape == (6, 32) and batch.mask.all() and batch.x.shape == (6 * 32, store.dim)
    assert (batch.y[batch.pairs[:, 0]] == 1).all() and (batch.y[batch.pairs[:, 1]] == 0).all()


@pytest.mark.parametrize("cache_mb", [0, 512])
def test_whole_packing_and_mask(store, cache_mb):
    # Packed rows are the store's segments in order, whether read from the cache or the memory map.
    whole = WholeVideo(per_class=2)
    loader = BagLoader(store, whole, Standardizer(), ArrayCache(cache_mb))
    items = whole.items(store, store.videos("train"))
    batch = loader.collate(items[:4])
    assert len(batch.x) == int(batch.mask.sum())
    padded = batch.padded()
    for i, it in enumerate(items[:4]):
        assert int(batch.mask[i].sum()) == store.n_segments(it.video)
        np.testing.assert_array_equal(padded[i][batch.mask[i]].numpy(), store.views(it.video)[0])
        assert (padded[i][~batch.mask[i]] == 0).all()
    assert (loader.cache.used > 0) == (cache_mb > 0)


def test_standardised_batches_match_numpy_on_both_paths(store):
    # (x - mean) / std in float64 numpy is the reference; cached and uncached rows agree to float32.
    videos = store.videos("train")
    std = Standardizer.fit(store, videos)
    items = Windows(size=8).items(store, videos)[:10]
    ref = np.concatenate([(store.views(it.video)[0][it.start:it.start + it.length].astype(np.float64)
                           - std.mean) / std.std for it in items])
    got = {}
    for cache_mb in (0, 512):
        got[cache_mb] = BagLoader(store, Windows(size=8), std, ArrayCache(cache_mb)).collate(items).x.numpy()
        np.testing.assert_allclose(got[cache_mb], ref, rtol=1e-5, atol=1e-5)
    # bit for bit: a resumed run (cache empty) must see the numbers the first run saw
    np.testing.assert_array_equal(got[0], got[512])


@pytest.mark.parametrize("t", [5, 32, 45, 300])
def test_resample_chunks_is_span_mean(t):
    # Reference: an explicit loop over np.linspace spans (common practice for 32-chunk bags).
    rng = np.random.default_rng(t)
    x = rng.standard_normal((t, 3))
    got = resample_chunks(x, 32)
    b = np.linspace(0, t, 33).round().astype(int)
    for i in range(32):
        ref = x[b[i]:b[i + 1]].mean(0) if b[i + 1] > b[i] else x[min(b[i], t - 1)]
        np.testing.assert_allclose(got[i], ref, rtol=1e-5, atol=1e-6)


def test_standardizer_matches_numpy(store):
    videos = store.videos("train")[:5]
    std = Standardizer.fit(store, videos)
    allx = np.concatenate([store.views(v)[0] for v in videos]).astype(np.float64)
    np.testing.assert_allclose(std.mean, allx.mean(0), rtol=1e-5, atol=1e-5)
    np.testing.assert_allclose(std.std, allx.std(0), rtol=1e-4)
    z = std(allx.astype(np.float32))
    np.testing.assert_allclose(z.mean(0), 0, atol=1e-4)


def test_bad_bag_settings_are_refused():
    with pytest.raises(WsadError, match="order"):
        Windows(order="random")
    with pytest.raises(WsadError, match=">= 1"):
        Windows(size=0)
    with pytest.raises(WsadError, match="per class"):
        WholeVideo(per_class=0)
