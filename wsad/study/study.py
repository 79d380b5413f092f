"""A study: stores x variants x seeds that plans, runs (resumably, in worker processes that
outlive it), and reports.

Each run's folder is named by the fingerprint of its resolved config and store, inside the
study's folder: running the study again finds the finished runs there and trains only what is
missing, so a notebook cell can be run twice without training or logging anything twice."""
from __future__ import annotations

import json
from concurrent.futures import as_completed
from functools import cached_property
from pathlib import Path

import pandas as pd
from tqdm.auto import tqdm

from ..errors import WsadError
from .spec import RunSpec, as_overrides, expand_variants, label, quote, stores_of

ERROR = "error.txt"


class Study:
    """An ablation or comparison over one or more stores.

    Args:
        stores: a store folder, a list of them, or ``{name: folder}``.
        base: the configuration every run shares (``{"recipe": "windows", "trainer.epochs": 15}``
            or a list of ``key=value`` overrides, as wsad-train takes them).
        variants: a grid ``{key: [values]}``, a list of ``{key: value}`` dicts, or the name of a
            sweep preset of ``conf/sweep/`` (``"terms"``, ``"bags"``).
        seeds: the seeds (a count n means 0..n-1).
        folder: where the runs' folders are kept (the study resumes from it).
        name: the study's name (its MLflow experiment unless ``base`` sets one).
        primary: the metric the study is about (reports lead with it).
        baseline: the variant others are compared with (label or ``{key: value}``; default the first).
    """

    def __init__(self, stores, base=None, variants=None, seeds=3, folder: str | Path = "study",
                 name: str | None = None, primary: str = "frame_auc", baseline=None, alpha: float = 0.05):
        self.stores = stores_of(stores)
        self.base = as_overrides(base)
        self.variants, preset_seeds = expand_variants(variants)
        seeds = preset_seeds if preset_seeds is not None and seeds is None else seeds
        self.seeds = list(range(seeds)) if isinstance(seeds, int) else [int(s) for s in (seeds or [0])]
        self.folder = Path(folder)
        self.name = name or self.folder.name
        self.primary, self.alpha = primary, float(alpha)
        self.baseline = label(baseline) if isinstance(baseline, dict) else baseline
        if any(o.split("=", 1)[0].lstrip("+~") in ("seed", "data.root") for o in self.base):
            raise WsadError("base: leave seed and data.root out (the study sets them from seeds and stores)")

    # --- what it runs -------------------------------------------------------------------------------
    @cached_property
    def specs(self) -> list[RunSpec]:
        """Every run, with its fingerprint (composing each run's config: a fraction of a second each)."""
        from ..config import compose_config
        from ..store import store_fingerprint
        from ..tracking.params import settings_fingerprint

        extra = [] if any(o.startswith("tracking.experiment=") for o in self.base) else [
            f"tracking.experiment={self.name}"]
        out = []
        for store_name, root in self.stores.items():
            fp = store_fingerprint(root)
            for values in self.variants:
                for seed in self.seeds:
                    overrides = (f"data.root={quote(root)}", *self.base, *extra, *as_overrides(values),
                                 f"seed={seed}")
                    cfg = compose_config(list(overrides))
                    out.append(RunSpec(root, store_name, label(values), tuple(values.items()), seed,
                                       overrides, settings_fingerprint(cfg, fp), cfg))
        return out

    def run_folder(self, spec: RunSpec) -> Path:
        return self.folder / "runs" / spec.fingerprint

    def status(self, spec: RunSpec) -> str:
        folder = self.run_folder(spec)
        if (folder / "summary.json").is_file():
            return "done"
        return "failed" if (folder / ERROR).is_file() else "to run"

    def runs(self) -> pd.DataFrame:
        """One row per run: store, variant, seed, status, error, folder."""
        rows = []
        for spec in self.specs:
            folder, status = self.run_folder(spec), self.status(spec)
            rows.append({"store": spec.store_name, "variant": spec.variant, "seed": spec.seed, "status": status,
                         "error": (folder / ERROR).read_text().strip() if status == "failed" else None,
                         "folder": str(folder)})
        return pd.DataFrame(rows)

    def plan(self, effect: float | None = None, power: float = 0.8):
        """The runs the study implies and which are done; with ``effect`` (a difference in the
        primary metric), the seeds each comparison needs, from the spread the finished runs show."""
        from .plan import Plan

        return Plan(self, effect, power)

    # --- running ------------------------------------------------------------------------------------
    def run(self, jobs: int = 2, launcher: str | dict | None = None) -> pd.DataFrame:
        """Train every run not done yet (failed ones again), ``jobs`` at a time in worker processes
        that stay alive for later studies (``jobs=1``: in this process), or with ``launcher`` as
        scheduler jobs through submitit (``"slurm"``, ``"local"``, or a dict with ``name`` and
        submitit's parameters, e.g. ``slurm_partition``, ``timeout_min``). A failing run becomes a
        row with its error; the others finish. Returns :meth:`runs`."""
        from ..workers import execute, submit

        todo = [s for s in self.specs if self.status(s) != "done"]
        if not todo:
            return self.runs()
        parent = self._parent_run()
        extra = {"trainer.threads": 1} if jobs > 1 or launcher else {}
        if not any(o.split("=", 1)[0] == "trainer.plots" for o in self.base):
            extra["trainer.plots"] = False   # the report draws the overlays from the exported scores
        bar = tqdm(total=len(todo), desc=f"study {self.name}", unit="run")
        try:
            if launcher:
                for spec, result in self._scheduled(todo, extra, parent, launcher):
                    self._record(spec, result)
                    bar.update()
            elif jobs <= 1:
                for spec in todo:
                    self._record(spec, execute(spec, str(self.run_folder(spec)), parent, extra))
                    bar.update()
            else:
                futures = {submit(jobs, spec, str(self.run_folder(spec)), parent, extra): spec
                           for spec in todo}
                for f in as_completed(futures):
                    self._record(futures[f], f.result())
                    bar.update()
        finally:
            bar.close()
            self._close_parent(parent)
        return self.runs()

    def _scheduled(self, todo: list[RunSpec], extra: dict, parent: str | None, launcher):
        """The runs as submitit jobs (one array), yielding (spec, result) as they end."""
        import submitit

        from ..workers import execute

        opts = {"name": launcher} if isinstance(launcher, str) else dict(launcher)
        cluster = str(opts.pop("name", "slurm"))
        if cluster not in ("slurm", "local"):
            raise WsadError(f"launcher {cluster!r}; use slurm or local")
        ex = submitit.AutoExecutor(folder=str(self.folder / "submitit" / "%j"), cluster=cluster)
        ex.update_parameters(**{"timeout_min": 60, "cpus_per_task": 1, **opts})
        with ex.batch():
            jobs = [ex.submit(execute, s, str(self.run_folder(s)), parent, extra) for s in todo]
        for spec, job in zip(todo, jobs):
            try:
                yield spec, job.result()
            except Exception as err:  # noqa: BLE001 - a job the scheduler lost is that run's failure
                yield spec, {"ok": False, "error": f"job {job.job_id}: {str(err).splitlines()[0][:300]}"}

    def _record(self, spec: RunSpec, result: dict) -> None:
        folder = self.run_folder(spec)
        (folder / ERROR).unlink(missing_ok=True)
        if not result["ok"]:
            folder.mkdir(parents=True, exist_ok=True)
            (folder / ERROR).write_text(result["error"].replace("\n", " ") + "\n")

    def _tracking(self) -> tuple[str, str] | None:
        from ..config import compose_config
        from ..tracking import resolve_uri

        cfg = compose_config(list(self.specs[0].overrides))
        return (resolve_uri(str(cfg.tracking.uri)), str(cfg.tracking.experiment)) if cfg.tracking.enabled else None

    def _parent_run(self) -> str | None:
        """The study's parent run in MLflow (made once, reused when the study resumes)."""
        where = self._tracking()
        if where is None:
            return None
        from ..tracking import prepare
        from ..tracking.client import TrackedRun

        uri, experiment = where
        prepare(uri, experiment)
        state = self.folder / "study.json"
        known = json.loads(state.read_text()) if state.is_file() else {}
        if known.get("parent_run") and known.get("uri") == uri:
            return TrackedRun.reopen(uri, known["parent_run"]).run_id
        run = TrackedRun.start(uri, experiment, f"study {self.name}", {"study.runs": str(len(self.specs))},
                               {"wsad.sweep": "parent", "wsad.study": self.name})
        self.folder.mkdir(parents=True, exist_ok=True)
        state.write_text(json.dumps({"parent_run": run.run_id, "uri": uri}))
        return run.run_id

    def _close_parent(self, parent: str | None) -> None:
        if parent:
            from ..tracking.client import TrackedRun

            TrackedRun(self._tracking()[0], parent).finish("FINISHED")

    # --- reading ------------------------------------------------------------------------------------
    def results(self) -> pd.DataFrame:
        """One row per finished run: store, variant, seed, folder, params.* and metrics.* columns."""
        from ..publish import Run

        rows = []
        for spec in self.specs:
            if self.status(spec) != "done":
                continue
            run = Run.from_folder(self.run_folder(spec))
            row = {"store": spec.store_name, "variant": spec.variant, "params.seed": str(spec.seed),
                   "seed": str(spec.seed), "folder": str(run.folder), "run_id": run.summary.get("run_id")}
            row.update({f"params.{k}": str(v) for k, v in spec.values})
            row.update({f"metrics.{k}": v for k, v in run.metrics.items()})
            rows.append(row)
        return pd.DataFrame(rows)

    def report(self):
        """The seed-aggregated comparison (per store): a :class:`~wsad.study.report.StudyReport`."""
        from .report import StudyReport

        return StudyReport(self)

    def load(self, variant: str | None = None, seed: int | None = None, store: str | None = None):
        """The finished :class:`~wsad.publish.Run` of one variant and seed (default: the first)."""
        from ..publish import Run

        for spec in self.specs:
            if ((variant is None or spec.variant == variant) and (seed is None or spec.seed == seed)
                    and (store is None or spec.store_name == store) and self.status(spec) == "done"):
                return Run.from_folder(self.run_folder(spec))
        raise WsadError(f"no finished run of variant={variant!r} seed={seed!r} store={store!r}")
