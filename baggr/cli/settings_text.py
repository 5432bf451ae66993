"""A run's settings in the command's words: the values the data chose, and the rule they came from."""
from __future__ import annotations

from baggr.config import Config
from baggr.runs.journal import grown_on

_RULES = {"sqrt": "the square root rule", "log2": "the log2 rule", "1/3": "a third"}


def features_text(config: Config, n_features: int, task: str) -> str:
    """'2 of 7 features (the square root rule, the default for classes)'."""
    k = config.resolved_features(n_features, task)
    rule = config.features_rule(task)
    f = config.features_per_split
    if f is None:
        why = f"{_RULES[rule]}, the default for {'classes' if task == 'classes' else 'regression'}"
    elif isinstance(f, str):
        why = _RULES[f]
    elif isinstance(f, float):
        why = f"{f:g} of them"
    else:
        why = "as asked"
    return f"{k} of {n_features} features ({why})"


def setting_rows(config: Config, n_features: int, task: str, threads: int | None = None,
                 cluster: dict | None = None) -> list[tuple[str, str]]:
    """(label, value) pairs, each as `baggr train` names it, with what an unset one resolved to;
    cluster: where the latest job grew the members (journal.cluster_of), None for local threads."""
    crit = config.resolved_criterion(task)
    draw = config.draw + (f", {config.draw_fraction:g} of the rows" if config.draw == "subsample" else "")
    if config.threads is not None:
        thr = str(config.threads)
    else:
        thr = f"all cores ({threads})" if threads else "all cores"
    return [
        ("members", str(config.members)),
        ("features per split", features_text(config, n_features, task)),
        ("min leaf", str(config.min_leaf)),
        ("depth limit", "none" if config.depth_limit is None else str(config.depth_limit)),
        ("bins", str(config.bins)),
        ("draw", draw),
        ("criterion", crit + (" (the default)" if config.criterion is None else "")),
        ("vote", config.vote),
        ("task", task + (" (from the target)" if config.task is None else " (as asked)")),
        ("seed", str(config.seed)),
        ("threads", thr) if not cluster else ("grown on", grown_on(cluster)),
        ("trees kept", "yes (for baggr predict)" if config.keep_members else "no (--estimate-only)"),
        ("measure", config.measure or (("error" if task == "classes" else "mse") + " (the default)")),
        ("importance", "yes (--importance)" if config.importance else "no"),
    ]


def settings_json(config: Config, n_features: int, task: str, threads: int | None = None,
                  cluster: dict | None = None) -> dict:
    """Config.to_dict() with the values the data chose in place of the unset ones, and their rules;
    with a cluster, "cluster": where the members grew (option, address, workers, threads)."""
    d = config.to_dict()
    d.update(features_per_split=config.resolved_features(n_features, task),
             features_per_split_rule=config.features_rule(task) if config.features_per_split is None
             else config.features_per_split, criterion=config.resolved_criterion(task),
             task=task, task_from="asked" if config.task is not None else "the target")
    if d["threads"] is None and threads:
        d["threads"] = threads
    if cluster:
        d["cluster"] = dict(cluster)
    return d
