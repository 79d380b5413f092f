"""``hydra/launcher=workers``: a sweep's trials on N worker processes that import torch, the
training code and MLflow once each, started by ``wsad-train`` before Hydra composes the sweep
(so their imports overlap the launcher's own start) and fed one trial at a time as they free
up. The trials run where :func:`wsad.sweep.run_trial` runs them; the design and its measurement
are in :mod:`wsad.sweep`."""
from __future__ import annotations

import logging
from collections.abc import Sequence
from pathlib import Path

from hydra.core.utils import JobReturn, configure_log, filter_overrides, setup_globals
from hydra.plugins.launcher import Launcher
from hydra.types import HydraContext, TaskFunction
from omegaconf import DictConfig, open_dict

log = logging.getLogger(__name__)


class WorkersLauncher(Launcher):
    def __init__(self, n_jobs: int = 2) -> None:
        if int(n_jobs) < 1:
            raise ValueError(f"hydra.launcher.n_jobs must be at least 1, got {n_jobs}")
        self.n_jobs = int(n_jobs)
        self.config: DictConfig | None = None
        self.task_function: TaskFunction | None = None
        self.hydra_context: HydraContext | None = None

    def setup(self, *, hydra_context: HydraContext, task_function: TaskFunction, config: DictConfig) -> None:
        self.config, self.task_function, self.hydra_context = config, task_function, hydra_context
        # The sweeper composes every trial's config to validate the batch before it launches it
        # (measured: about a second each on two busy cores); keep those, not compose them again.
        loader, compose = hydra_context.config_loader, hydra_context.config_loader.load_sweep_config
        self._composed: dict[tuple[str, ...], DictConfig] = {}

        def load_sweep_config(master_config: DictConfig, sweep_overrides: list[str]) -> DictConfig:
            key = tuple(sweep_overrides)
            if key not in self._composed:
                self._composed[key] = compose(master_config, sweep_overrides)
            return self._composed[key]

        self._restore = lambda: loader.__dict__.pop("load_sweep_config", None)
        loader.load_sweep_config = load_sweep_config

    def launch(self, job_overrides: Sequence[Sequence[str]], initial_job_idx: int) -> Sequence[JobReturn]:
        from wsad import sweep

        setup_globals()
        assert self.config is not None and self.hydra_context is not None and self.task_function is not None
        configure_log(self.config.hydra.hydra_logging, self.config.hydra.verbose)
        Path(str(self.config.hydra.sweep.dir)).mkdir(parents=True, exist_ok=True)
        log.info(f"{len(job_overrides)} trials on {self.n_jobs} worker process(es)")
        composed, self._composed = self._composed, {}
        self._restore()   # the context goes to the workers: with Hydra's own method

        def configs():
            for i, overrides in enumerate(job_overrides):
                idx = initial_job_idx + i
                log.info(f"\t#{idx} : {' '.join(filter_overrides(overrides))}")
                cfg = composed.pop(tuple(overrides), None)
                if cfg is None:
                    cfg = self.hydra_context.config_loader.load_sweep_config(self.config, list(overrides))
                with open_dict(cfg):
                    cfg.hydra.job.id = f"{cfg.hydra.job.name}_{idx}"
                    cfg.hydra.job.num = idx
                yield cfg

        try:
            return sweep.run_trials(self.n_jobs, configs(), self.hydra_context, self.task_function)
        finally:
            self.setup(hydra_context=self.hydra_context, task_function=self.task_function, config=self.config)
