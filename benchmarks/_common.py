"""What the benchmark scripts share: sizes, stores, machine details, memory sampling.

Every script prints one JSON object on stdout; ``run_all.py`` merges them.
Goals are ratios measured in one process, because these machines are noisy.
"""
from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
WORK = Path(os.environ.get("WSAD_BENCH_WORK", ROOT / "benchmarks" / ".work"))
SIZES = ("tiny", "quick", "full")

# Stores per size: (scenario, overrides). ``full`` is research scale (warehouse_large:
# 1,620 train + 300 test videos, 1024-d); ``quick`` keeps the 1024-d features and the
# video lengths but fewer cameras; ``tiny`` only checks that the scripts still run.
STORES = {
    "tiny": ("warehouse", ["dim=32", "videos_per_camera.train=6", "videos_per_camera.test=6",
                           "length.mean=40", "length.max=120"]),
    "quick": ("warehouse_large", ["cameras.conveyor.train=6", "cameras.loading_bay.train=6",
                                  "cameras.walkway.train=6", "cameras.conveyor.test=2",
                                  "cameras.loading_bay.test=2", "cameras.walkway.test=2"]),
    "full": ("warehouse_large", []),
}


def size_arg() -> str:
    size = sys.argv[1] if len(sys.argv) > 1 else "quick"
    if size not in SIZES:
        sys.exit(f"benchmark size {size!r} is not known; use one of {', '.join(SIZES)}")
    return size


def store(size: str, extra: list[str] | None = None, tag: str = "") -> Path:
    """A synthetic store for this size, generated once and reused (the folder
    name carries the overrides, so a changed recipe makes a new store)."""
    scenario, overrides = STORES[size]
    overrides = overrides + list(extra or [])
    name = f"{size}{('-' + tag) if tag else ''}"
    path = WORK / name
    recipe = json.dumps([scenario, overrides])
    if (path / "store.json").is_file() and (path / ".recipe").is_file() \
            and (path / ".recipe").read_text() == recipe:
        return path
    if path.exists():
        import shutil
        shutil.rmtree(path)
    from wsad.synthetic import generate_store, load_scenario

    WORK.mkdir(parents=True, exist_ok=True)
    generate_store(load_scenario(scenario, overrides), path, progress=False)
    (path / ".recipe").write_text(recipe)
    return path


def disk_gb(path: Path) -> float:
    return sum(f.stat().st_size for f in Path(path).rglob("*") if f.is_file()) / 2 ** 30


def machine() -> dict:
    """Where the figures were measured."""
    import torch

    info = {"python": platform.python_version(), "torch": torch.__version__,
            "platform": platform.platform(), "cpus": os.cpu_count(),
            "torch_threads": torch.get_num_threads()}
    for lib in ("numpy", "sklearn"):  # the references' speed moves with their versions
        try:
            info[lib] = __import__(lib).__version__
        except ImportError:
            info[lib] = None
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                info["cpu"] = line.split(":", 1)[1].strip()
                break
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal"):
                info["ram_gb"] = round(int(line.split()[1]) / 2 ** 20, 1)
    except OSError:
        pass
    try:
        info["commit"] = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT,
                                        capture_output=True, text=True).stdout.strip() or None
    except OSError:
        info["commit"] = None
    return info


def anon_rss_gb() -> float:
    """Anonymous resident memory of this process (file-backed pages excluded)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("RssAnon:"):
            return int(line.split()[1]) / 2 ** 20
    raise OSError("RssAnon is not in /proc/self/status")


class PeakAnon:
    """Samples RssAnon every ``every`` seconds in a thread; ``peak`` in GiB."""

    def __init__(self, every: float = 0.02):
        self.every, self.peak, self._stop = every, anon_rss_gb(), threading.Event()

    def __enter__(self):
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()
        return self

    def _run(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, anon_rss_gb())
            time.sleep(self.every)

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, anon_rss_gb())


def best_of(fn, repeats: int = 3) -> float:
    """Lowest wall time of ``repeats`` calls (the least disturbed one)."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def emit(result: dict) -> None:
    print(json.dumps(result, indent=1, default=float))
