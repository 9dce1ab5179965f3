"""Pruning: fold fits saved by per-fold pruning, and what it costs in final score.

The same TPE search (same seed, same families, same folds) runs twice in-process on each
dataset: with tutti's pruner (median of earlier trials' running fold means, as in
``workers.search.open_study``) and with no pruning. Printed per dataset: fold fits of each
run, the share saved (goal ≥ 30%), and the best CV score of each with its standard error
over folds (goal: pruned within one standard error of unpruned).

    .venv/bin/python benchmarks/pruning.py [--trials 60] [--datasets breast_cancer,wine]
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse
import warnings

import numpy as np
import optuna
from _common import print_table
from sklearn import datasets as skd
from tuttiml.service.data import prepare
from tuttiml.service.spec import Metric, SearchSpec
from tuttiml.workers.datasets import build_dataset
from tuttiml.workers.evaluation import Pruned, cross_validate
from tuttiml.workers.families import get_family
from tuttiml.workers.search import make_pruner

optuna.logging.set_verbosity(optuna.logging.WARNING)
FAMILIES = ("boosting", "bagging", "single")
LOADERS = {
    "breast_cancer": skd.load_breast_cancer,
    "wine": skd.load_wine,
    "diabetes": skd.load_diabetes,
}


def run(name: str, trials: int, prune: bool, seed: int = 0) -> tuple[int, float, float]:
    frame = LOADERS[name](as_frame=True).frame
    prep = prepare(frame, SearchSpec(target="target", families=FAMILIES, seed=seed))
    record = {
        "task": prep.task,
        "schema": prep.schema,
        "columns": {"high_cardinality": list(prep.high_cardinality_columns)},
    }
    data = build_dataset(prep.frame, record, prep.spec)
    metric = Metric(prep.spec.metric)
    ctx = data.context(seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sampler = optuna.samplers.TPESampler(
            seed=seed, multivariate=True, group=True, n_startup_trials=10
        )
    pruner = make_pruner() if prune else optuna.pruners.NopPruner()
    study = optuna.create_study(direction="maximize", sampler=sampler, pruner=pruner)
    fits = 0
    best: tuple[float, float] = (-np.inf, 0.0)
    for _ in range(trials):
        trial = study.ask()
        fam = trial.suggest_categorical("family", FAMILIES)
        est = get_family(fam).build(get_family(fam).suggest(trial, ctx), ctx)
        scores: list[float] = []

        def on_fold(
            i: int, s: float, trial: optuna.Trial = trial, scores: list[float] = scores
        ) -> bool:
            scores.append(s)
            trial.report(float(np.mean(scores)), i)
            return len(scores) >= data.n_folds or not trial.should_prune()

        try:
            ev = cross_validate(est, data, metric, on_fold=on_fold)
        except Pruned:
            fits += len(scores)
            study.tell(trial, state=optuna.trial.TrialState.PRUNED)
            continue
        fits += len(ev.fold_scores)
        study.tell(trial, ev.mean)
        if ev.mean > best[0]:
            best = (ev.mean, ev.std / np.sqrt(len(ev.fold_scores)))
    return fits, best[0], best[1]


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--trials", type=int, default=60)
    p.add_argument("--datasets", default="breast_cancer,wine,diabetes")
    args = p.parse_args()
    rows = []
    for name in args.datasets.split(","):
        f_p, s_p, se_p = run(name, args.trials, True)
        f_n, s_n, se_n = run(name, args.trials, False)
        rows.append(
            {
                "dataset": name,
                "fold fits pruned": f_p,
                "fold fits unpruned": f_n,
                "saved": f"{1 - f_p / f_n:.0%}",
                "best pruned": f"{s_p:.4f} ± {se_p:.4f}",
                "best unpruned": f"{s_n:.4f} ± {se_n:.4f}",
                "within 1 SE": "yes" if s_p >= s_n - max(se_n, se_p) else "no",
            }
        )
    print_table(list(rows[0]), [list(r.values()) for r in rows])
    print("\nscores are greater-is-better (losses negated); SE = fold std / sqrt(folds)")


if __name__ == "__main__":
    main()
