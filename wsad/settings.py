"""The typed settings of the plain groups (trainer, data, evaluate, tracking): each key, its
type, its default and its meaning, declared once here.

Hydra uses these dataclasses as schemas (``conf/<group>/default.yaml`` extends
``<group>/schema``), so a misspelt key or a value of the wrong type is refused when a config is
composed. :func:`check_overrides` refuses the same mistakes earlier, in one line that names the
closest valid key, before Hydra would print a screenful. A field's metadata says which values
it takes (``choices``) and whether it can change a result (``bookkeeping``: where or how a run
runs, never what it computes); reports tell variants apart by every other key.
"""
from __future__ import annotations

import difflib
from dataclasses import MISSING, dataclass, field, fields
from typing import Any, Optional

from .errors import WsadError


def _f(default: Any, help: str, choices: tuple | None = None, bookkeeping: bool = False) -> Any:
    meta = {"help": help, "choices": choices, "bookkeeping": bookkeeping}
    if isinstance(default, (list, dict)):
        return field(default_factory=lambda: type(default)(default), metadata=meta)
    return field(default=default, metadata=meta)


@dataclass
class TrainerSettings:
    epochs: int = _f(30, "epochs to train (>= 1)")
    select: str = _f("weak_val", "which epoch's model is kept: the last, or the best weak-validation video "
                     "AUC (held-out train cameras, video labels; never test labels)", ("last", "weak_val"))
    weak_val_share: float = _f(0.2, "share of train cameras held out for weak validation")
    weak_val_folds: int = _f(1, "k >= 2: k-fold weak validation over train cameras, then a refit on all")
    weak_val_fold: int = _f(0, "the fold held out (set by the k-fold choice itself)")
    select_smooth: int = _f(1, "select on the trailing mean of this many epochs' weak-validation AUC")
    min_epoch: int = _f(1, "no epoch before this one is selected")
    refit: bool = _f(False, "after selecting an epoch count, retrain on all train videos for that many")
    members: Any = _f("auto", "models trained with seeds seed, seed + 1000, ... whose segment scores are averaged; "
                      "auto: 5 on a small collection (< 4,000 training segments), else 1 (wsad.train.members)")
    members_holdout: str = _f("shared", "with several members: shared (every member selected on the same held-out "
                              "share) or folds (member i holds out fold i of the train cameras; the video threshold "
                              "is chosen on every train video's out-of-fold score)", ("shared", "folds"))
    grad_clip: Optional[float] = _f(None, "clip the gradient norm to this (null: no clipping)")
    threads: Optional[int] = _f(None, "torch threads; null = all cores, or 1 per job in a sweep", bookkeeping=True)
    bootstrap: int = _f(1000, "cluster resamples for the final intervals (0 skips intervals)")
    bootstrap_by: Optional[str] = _f(None, "the unit intervals treat as independent: video, group (camera), "
                                     "or null: the camera", ("video", "group", None))
    interval: str = _f("jackknife", "frame AUC interval: jackknife (over cameras, logit scale, t on the effective "
                       "cameras - 1; the default, its coverage measured in the docs), clustered (Obuchowski 1997 "
                       "variance, t on clusters - 1) "
                       "or logit (the same on the logit scale), percentile, bc or bca (cluster bootstrap)",
                       ("jackknife", "clustered", "logit", "percentile", "bc", "bca"))
    eval_every: int = _f(1, "test metrics every N epochs, for the learning curves only", bookkeeping=True)
    resume: Optional[str] = _f(None, "an MLflow run id to continue", bookkeeping=True)
    progress: bool = _f(True, "show the progress bar", bookkeeping=True)
    plots: Any = _f("auto", "true, false or auto (a single run draws its plots; a sweep leaves them to "
                    "wsad-report)", (True, False, "auto"), bookkeeping=True)
    out_dir: Optional[str] = _f(None, "the run folder (null: Hydra's run folder)", bookkeeping=True)


@dataclass
class DataSettings:
    root: str = _f(MISSING, "the feature store (wsad-synth or wsad-index makes one)", bookkeeping=True)
    standardize: bool = _f(True, "per-dim (x - mean) / std fitted on training segments")
    crops: str = _f("mean", "[crops, T, D] arrays: mean over crops, or each crop as its own bag", ("mean", "each"))
    cache_mb: float = _f(512, "prepared bags and evaluation arrays kept in RAM (MB)", bookkeeping=True)


@dataclass
class EvaluateSettings:
    budget: float = _f(1.0, "false alarms per camera-hour the operating point allows (on held-out normal "
                       "training videos)")
    min_alarm_s: float = _f(0.0, "alarms shorter than this (seconds) are dropped")
    merge_gap_s: float = _f(0.0, "alarms closer than this (seconds) are merged")
    budget_confidence: Optional[float] = _f(None, "null: the threshold keeps the held-out rate within the budget; "
                                            "a level (0.95): keeps its exact Poisson upper bound within it")
    stores: list = _f([], "other stores (same feature dim) whose test splits the selected model is scored on")
    video_threshold_rule: str = _f("auto", "how video_threshold is chosen on held-out training videos: "
                                   "balanced_accuracy (the best cut) or class_medians (halfway between the two "
                                   "classes' median scores); auto: class_medians in the small-collection mode, "
                                   "else balanced_accuracy", ("auto", "balanced_accuracy", "class_medians"))


@dataclass
class TrackingSettings:
    uri: str = _f("sqlite:///mlruns.db", "any MLflow tracking URI", bookkeeping=True)
    experiment: str = _f("wsad", "the MLflow experiment", bookkeeping=True)
    run_name: Optional[str] = _f(None, "null = recipe + changed overrides + seed", bookkeeping=True)
    enabled: bool = _f(True, "log to MLflow (false: the run folder only)", bookkeeping=True)


#: The typed groups, by config key.
SCHEMAS: dict[str, type] = {"trainer": TrainerSettings, "data": DataSettings, "evaluate": EvaluateSettings,
                            "tracking": TrackingSettings}
#: Keys that moved: the old spelling -> what to write instead.
MOVED = {"trainer.schedule": "schedule=NAME (a component group: none, cosine)"}


def register_schemas() -> None:
    """Put each schema into Hydra's config store as ``<group>/schema`` (each group's
    ``default.yaml`` extends it). Call before composing a config."""
    from hydra.core.config_store import ConfigStore

    for group, schema in SCHEMAS.items():
        ConfigStore.instance().store(group=group, name="schema", node=schema)


def bookkeeping_keys() -> tuple[str, ...]:
    """Config keys that cannot change what a run computes (from the schemas' metadata)."""
    return tuple(f"{g}.{f.name}" for g, s in SCHEMAS.items() for f in fields(s) if f.metadata.get("bookkeeping"))


def settings_table() -> list[dict]:
    """Every typed key with its type, default and meaning (for the docs)."""
    rows = []
    for g, s in SCHEMAS.items():
        for f in fields(s):
            default = f.default_factory() if f.default_factory is not MISSING else f.default
            rows.append({"key": f"{g}.{f.name}", "default": "required" if default is MISSING else default,
                         "meaning": f.metadata["help"]})
    return rows


# --- checking overrides before Hydra composes ---------------------------------------------
def parse_overrides(overrides: list[str]):
    """Hydra's own parser (a path holding a comma or brackets is one value)."""
    from hydra.core.override_parser.overrides_parser import OverridesParser
    from hydra.errors import OverrideParseException

    try:
        return OverridesParser.create().parse_overrides(list(overrides))
    except OverrideParseException as err:
        raise WsadError(f"could not read the override: {str(err).splitlines()[0]}") from None


def check_overrides(overrides: list[str]) -> None:
    """One clear line for a misspelt key of a typed group (with the closest valid key), a
    value of the wrong type or outside a key's choices, and a key that moved."""
    for o in parse_overrides(overrides):
        key = o.key_or_group
        if key in MOVED:
            raise WsadError(f"{key} is no longer a setting; use {MOVED[key]}")
        group, _, name = key.partition(".")
        if group not in SCHEMAS or not name or "." in name:
            continue
        known = {f.name: f for f in fields(SCHEMAS[group])}
        if name not in known:
            close = difflib.get_close_matches(name, known, n=1, cutoff=0.5)
            hint = f"did you mean {group}.{close[0]}?" if close else f"known: {', '.join(sorted(known))}"
            raise WsadError(f"{key} is not a setting; {hint}")
        if o.is_delete():
            continue
        if not o.is_sweep_override():
            values = [o.value()]
        else:   # the listed values of a choice or range; an interval or glob is left to Hydra
            values = list(o.sweep_iterator()) if o.is_choice_sweep() or o.is_range_sweep() else []
        for value in values:
            _check_value(group, known[name], value)


def check_config(cfg) -> None:
    """The choice-valued keys of a composed (or resumed) config, each within its choices."""
    for group, schema in SCHEMAS.items():
        node = cfg.get(group) or {}
        for f in fields(schema):
            choices = f.metadata.get("choices")
            if choices is not None and f.name in node and node.get(f.name) not in choices:
                raise WsadError(f"{group}.{f.name}={_show(node.get(f.name))}; use one of {_choices(choices)}")


def _choices(choices: tuple) -> str:
    return ", ".join(_show(c) for c in choices)


def _check_value(group: str, f, value: Any) -> None:
    from omegaconf import OmegaConf
    from omegaconf.errors import OmegaConfBaseException

    key = f"{group}.{f.name}"
    choices = f.metadata.get("choices")
    if choices is not None and value not in choices:
        raise WsadError(f"{key}={_show(value)}; use one of {_choices(choices)}")
    schema = OmegaConf.structured(SCHEMAS[group])
    try:
        OmegaConf.merge(schema, {f.name: value})
    except OmegaConfBaseException:
        raise WsadError(f"{key}={_show(value)}: {key} takes {_type_name(f.type)}") from None


def _type_name(t: Any) -> str:
    text = str(t).replace("typing.", "")
    names = {"int": "a whole number", "float": "a number", "bool": "true or false", "str": "text",
             "Optional[int]": "a whole number or null", "Optional[float]": "a number or null",
             "Optional[str]": "text or null", "list": "a list, e.g. [a,b]"}
    return names.get(text, text)


def _show(value: Any) -> str:
    return "null" if value is None else str(value).lower() if isinstance(value, bool) else str(value)
