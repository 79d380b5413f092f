"""Peak anonymous memory while training one epoch on a multi-crop store.

The store holds several crops (views) per segment, so it is several times
the size of the single-view store (>= 6 GB on disk for ``full``). Training
reads it through memory maps: those pages belong to the operating system's
file cache, not to the process, so the figure that must stay bounded is the
process's anonymous resident memory (RssAnon in /proc, sampled every 20 ms
by a thread), measured in a fresh process that runs one whole epoch of the
top-k recipe (training, weak validation, test scoring, intervals, export).

    python benchmarks/memory.py [tiny|quick|full]
"""
from __future__ import annotations

import json
import subprocess
import sys
import tempfile

from _common import PeakAnon, anon_rss_gb, disk_gb, emit, size_arg, store

CROPS = {"tiny": ["crops=3"], "quick": ["crops=4"], "full": ["crops=7"]}


def child(root: str) -> dict:
    before = anon_rss_gb()
    from wsad.config import compose_config
    from wsad.train import train

    with tempfile.TemporaryDirectory() as out, PeakAnon() as peak:
        imported = anon_rss_gb()
        cfg = compose_config([f"data.root={root}", "recipe=topk", "trainer.epochs=1",
                              "tracking.enabled=false", "trainer.progress=false", f"trainer.out_dir={out}"])
        train(cfg)
    return {"peak_anon_rss_gb": peak.peak, "interpreter_gb": before, "after_imports_gb": imported}


def run(size: str) -> dict:
    root = store(size, CROPS[size], tag="crops")
    res = subprocess.run([sys.executable, __file__, "--child", str(root)], capture_output=True,
                         text=True, check=True)
    out = json.loads(res.stdout.strip().splitlines()[-1])
    return {"memory": {**out, "store_gb": disk_gb(root), "crops": int(CROPS[size][0].split("=")[1])}}


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--child":
        print(json.dumps(child(sys.argv[2])))
    else:
        emit(run(size_arg()))
