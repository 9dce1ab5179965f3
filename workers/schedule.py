"""What a shard runs next: the family with the most expected gain per second.

The search spends its budget on *members* (single learners, bagging, boosting). Composite
families (voting, stacking, blending) re-fit their members inside every fold, often 10–50×
the cost of a member trial; their plain forms are built for free from the members' stored
out-of-fold predictions (``workers.composites``), so composite *trials* get budget only late
(once ``COMPOSITE_AFTER`` of the budget is spent and members have been scored), and only
when their expected gain per second competes.

Each family is an arm. From its finished trials (complete and pruned: pruned trials cost
time too) the arm gets a cost (mean seconds per trial) and a score model: a normal
distribution whose mean is the mean of the arm's better half of scores (where its sampler
now concentrates) and whose spread is the arm's standard deviation shrunk towards the
spread of every trial. The expected improvement over the best score so far (Jones, Schonlau
and Welch, "Efficient Global Optimization of Expensive Black-Box Functions", 1998) divided
by the cost, and weighted by the arm's chance that a trial completes (pruned trials gain
nothing), is the arm's expected gain per second; the arm with the most runs next. An arm
not yet tried is explored first (cheapest estimated cost first), so every eligible family
gets at least one trial.

The start of a job is the portfolio (``portfolio_trials``): strong, diverse member
configurations enqueued before the sampler takes over.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from tuttiml.workers.families import get_family
from tuttiml.workers.families._base import FamilyContext

#: Families whose trials fit one model (or one bag / boosted sequence) per fold.
MEMBER_FAMILIES: frozenset[str] = frozenset({"single", "bagging", "boosting"})
#: The parameter that picks a member family's learner or kind: each value tried so far is
#: an arm of its own (``boosting|lgbm``), beside the family's free arm (sampler's choice).
SUB_PARAM: dict[str, str] = {
    "single": "single.learner",
    "boosting": "boosting.kind",
    "bagging": "bagging.kind",
}
SEP = "|"
#: Share of the budget (time or trials, whichever is further) spent before composite trials
#: that fit their own members may run (when the job also searches member families).
COMPOSITE_AFTER = 0.5
#: Complete member trials needed before composite trials may run.
COMPOSITE_MIN_MEMBERS = 4
#: An untried composite is explored only if its estimated cost is at most this share of
#: the search time left (a 50 s stack must not eat the last minute of a 2-minute job).
COMPOSITE_MAX_SHARE = 0.34
#: Share of the sampled trials that go to a member family's own arm (the sampler picks the
#: learner: new learners get tried) once the family has learner arms of its own.
EXPLORE_SHARE = 0.25
#: Weight (in trials) of the spread of all trials in an arm's shrunk spread.
PRIOR_TRIALS = 3.0
#: Floor of the spread, relative to the best score's scale, so EI never collapses to 0.
MIN_SPREAD = 1e-4


def is_member(family: str) -> bool:
    """True for families whose trials are ensemble members (no inner member fits)."""
    return family in MEMBER_FAMILIES


@dataclass(frozen=True)
class Arm:
    """What the finished trials of one family say about its next trial.

    Attributes:
        family: family name.
        n: finished trials (complete or pruned).
        scores: scores of complete trials (greater is better).
        seconds: mean wall seconds of a finished trial (0 when ``n == 0``).
        units: mean estimated cost of a finished trial in the families' cost units (one
            default LightGBM fit, see ``BaseFamily.cost``; rows carry it as ``cost``).
    """

    family: str
    n: int
    scores: tuple[float, ...]
    seconds: float
    units: float = 1.0

    def cost(self, measured: bool) -> float:
        """Seconds per trial, or cost units when the schedule must not depend on timing."""
        return self.seconds if measured else self.units


def arm_keys(family: str, params: Mapping[str, Any]) -> list[str]:
    """The arms a trial belongs to: its family's, and its learner's or kind's if it has one."""
    keys = [family]
    sub = SUB_PARAM.get(family)
    if sub is not None and sub in params:
        keys.append(f"{family}{SEP}{params[sub]}")
    return keys


def fixed_params(arm: str) -> dict[str, Any]:
    """The parameters an arm fixes for the sampler (``{"family": ..., sub-param: ...}``)."""
    family, _, sub = arm.partition(SEP)
    out: dict[str, Any] = {"family": family}
    if sub:
        out[SUB_PARAM[family]] = sub
    return out


def arms_from_rows(rows: Iterable[Mapping[str, Any]]) -> dict[str, Arm]:
    """Arms from the job's trial rows (failed rows are ignored: their retry is queued).

    Keys are family names (every trial of the family) and ``family|learner`` for the
    learners or kinds of member families (see ``SUB_PARAM``).
    """
    scores: dict[str, list[float]] = {}
    secs: dict[str, list[float]] = {}
    units: dict[str, list[float]] = {}
    for r in rows:
        state = r.get("state")
        if state not in ("complete", "pruned"):
            continue
        score = float(r["score"]) if state == "complete" and r.get("score") is not None else None
        for key in arm_keys(str(r.get("family", "unknown")), r.get("params") or {}):
            secs.setdefault(key, []).append(float(r.get("seconds") or 0.0))
            units.setdefault(key, []).append(float(r.get("cost") or 1.0))
            scores.setdefault(key, [])
            if score is not None and math.isfinite(score):
                scores[key].append(score)
    return {
        k: Arm(k, len(secs[k]), tuple(scores[k]), _mean(secs[k]), _mean(units[k])) for k in secs
    }


def _mean(values: Sequence[float]) -> float:
    return sum(values) / len(values) if values else 0.0


def _median(values: Sequence[float]) -> float:
    s = sorted(values)
    if not s:
        return 0.0
    mid = len(s) // 2
    return s[mid] if len(s) % 2 else 0.5 * (s[mid - 1] + s[mid])


def _std(values: Sequence[float]) -> float:
    if len(values) < 2:
        return 0.0
    m = sum(values) / len(values)
    return math.sqrt(sum((v - m) ** 2 for v in values) / (len(values) - 1))


def expected_improvement(mean: float, spread: float, best: float) -> float:
    """E[max(0, S - best)] for S ~ Normal(mean, spread²) (closed form)."""
    if spread <= 0:
        return max(mean - best, 0.0)
    z = (mean - best) / spread
    pdf = math.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)
    cdf = 0.5 * (1 + math.erf(z / math.sqrt(2)))
    return spread * (z * cdf + pdf)


def gain_per_second(
    arm: Arm, best: float, global_spread: float, *, measured: bool = True
) -> float:
    """Expected improvement of the arm's next trial over ``best``, per second it costs
    (per cost unit with ``measured=False``).

    A pruned trial improves nothing, so the improvement of a complete one is weighted by the
    arm's chance to complete, ``(complete + 1) / (finished + 2)``: an arm whose trials are
    cheap because they get pruned does not look cheap per unit of gain.
    """
    if not arm.scores:  # only pruned trials: it never beat the median so far
        return 0.0
    top = sorted(arm.scores, reverse=True)[: max(1, (len(arm.scores) + 1) // 2)]
    mean = sum(top) / len(top)
    k = len(arm.scores)
    floor = MIN_SPREAD * max(abs(best), 1.0)
    spread = math.sqrt(
        (k * _std(arm.scores) ** 2 + PRIOR_TRIALS * global_spread**2) / (k + PRIOR_TRIALS)
    )
    completes = (k + 1) / (arm.n + 2)
    gain = completes * expected_improvement(mean, max(spread, floor), best)
    return gain / max(arm.cost(measured), 0.05)


@dataclass(frozen=True)
class Budget:
    """How far the job is: ``spent`` in [0, 1] (time or trials) and search seconds left."""

    spent: float
    seconds_left: float


def estimated_seconds(family: str, fctx: FamilyContext, arms: Mapping[str, Arm]) -> float:
    """Seconds of a family's default trial: its cost units × the seconds one unit took.

    One unit is one default LightGBM fit (see ``BaseFamily.cost``); seconds per unit come
    from the arms already tried (their median trial over their default's cost), else 1.
    """
    per_unit = []
    for arm in arms.values():
        if SEP in arm.family:
            continue
        units = _default_cost(arm.family, fctx)
        if arm.n and units > 0:
            per_unit.append(arm.seconds / units)
    return _default_cost(family, fctx) * (_median(per_unit) if per_unit else 1.0)


def _default_cost(family: str, fctx: FamilyContext) -> float:
    fam = get_family(family)
    defaults = fam.defaults(fctx)
    return min((fam.cost(p, fctx) for p in defaults), default=1.0) if defaults else 1.0


def eligible(
    families: Sequence[str],
    arms: Mapping[str, Arm],
    budget: Budget,
    fctx: FamilyContext,
) -> list[str]:
    """The families that may run now (members always; composites late, see module doc)."""
    if not any(is_member(f) for f in families):
        return list(families)
    members_done = sum(len(arms[f].scores) for f in families if is_member(f) and f in arms)
    late = budget.spent >= COMPOSITE_AFTER and members_done >= COMPOSITE_MIN_MEMBERS
    out = []
    for f in families:
        fits = late and (
            f in arms
            or estimated_seconds(f, fctx, arms) <= COMPOSITE_MAX_SHARE * budget.seconds_left
        )
        if is_member(f) or fits:
            out.append(f)
    return out


def choose_arm(
    families: Sequence[str],
    rows: Iterable[Mapping[str, Any]],
    budget: Budget,
    fctx: FamilyContext,
    *,
    measured: bool = True,
) -> str:
    """The arm of the next sampled trial: an untried family first (cheapest), then the arm
    with the most expected gain per second.

    Arms are families (the sampler picks the learner or kind) and, for member families, each
    learner or kind already tried (``family|learner``: the sampler tunes only that one), so
    a learner that leads, e.g. LightGBM, gets tuned on its own. A member family's own arm
    mixes its learners, so its spread (and expected improvement) is inflated by the gaps
    between them: it competes only among the exploring arms, which get ``EXPLORE_SHARE``
    of the sampled trials (rows record the ``arm`` they were sampled for).

    Args:
        families: the job's families that support its task, in the spec's order.
        rows: the job's trial rows so far (any state).
        budget: how much of the budget is spent and the search seconds left.
        fctx: the family context (for cost estimates of untried families).
        measured: rank by measured seconds; ``False`` ranks by the families' cost estimates
            instead, so that a job run by one shard does not depend on timing (a run with one
            worker and a trial budget is reproducible).
    """
    arms = arms_from_rows(rows)
    pool = eligible(families, arms, budget, fctx)
    untried = [f for f in pool if f not in arms]
    if untried:
        return min(untried, key=lambda f: (estimated_seconds(f, fctx, arms), pool.index(f)))
    subs = sorted(k for k in arms if SEP in k and k.partition(SEP)[0] in pool)
    explore = [f for f in pool if any(k.partition(SEP)[0] == f for k in subs)]
    pool = [f for f in pool if f not in explore] + subs
    everything = [s for f in families if f in arms for s in arms[f].scores]
    if not everything:  # nothing complete yet: the cheapest arm
        return min(pool, key=lambda f: (arms[f].cost(measured), pool.index(f)))
    if explore and _explore_turn(rows, explore):
        pool = explore
    best = max(everything)
    spread = _std(everything)
    return max(
        pool,
        key=lambda f: (gain_per_second(arms[f], best, spread, measured=measured), -pool.index(f)),
    )


def _explore_turn(rows: Iterable[Mapping[str, Any]], explore: Sequence[str]) -> bool:
    """True when exploring arms got less than ``EXPLORE_SHARE`` of the sampled trials."""
    sampled = [str(r["arm"]) for r in rows if r.get("arm")]
    explored = sum(a in explore for a in sampled)
    return explored < EXPLORE_SHARE * len(sampled)


def choose_family(
    families: Sequence[str],
    rows: Iterable[Mapping[str, Any]],
    budget: Budget,
    fctx: FamilyContext,
    *,
    measured: bool = True,
) -> str:
    """The family of :func:`choose_arm`'s arm."""
    return choose_arm(families, rows, budget, fctx, measured=measured).partition(SEP)[0]


# --------------------------------------------------------------------------- the portfolio


def portfolio_trials(
    families: Sequence[str],
    fctx: FamilyContext,
    *,
    on_error: Callable[[str], None] | None = None,
) -> list[tuple[str, dict[str, Any]]]:
    """The configurations enqueued before the sampler: the learned portfolio, else defaults.

    With member families in the job, only they start (composites of members come from the
    stored out-of-fold predictions); the learned portfolio (``workers.portfolio``, greedy
    order) is used when it is installed, and the members' cheap defaults otherwise. A
    portfolio that cannot be read is reported through ``on_error`` and replaced by the
    defaults: a broken file must not stop every job.
    """
    usable = [f for f in families if fctx.task in get_family(f).tasks]
    start = [f for f in usable if is_member(f)] or usable
    try:
        learned = _learned_portfolio(fctx.task, start)
    except Exception as exc:
        if on_error is not None:
            on_error(f"portfolio unusable, members' defaults instead: {type(exc).__name__}: {exc}")
        learned = []
    if learned:
        return learned
    return default_trials(start, fctx)


def _learned_portfolio(task: str, families: Sequence[str]) -> list[tuple[str, dict[str, Any]]]:
    from tuttiml.workers.portfolio import portfolio_for

    out = []
    for entry in portfolio_for(task, list(families)):
        params = dict(entry)
        name = str(params.pop("family", ""))
        if name in families:
            out.append((name, params))
    return out


def default_trials(
    families: Sequence[str], fctx: FamilyContext
) -> list[tuple[str, dict[str, Any]]]:
    """Every family's default configurations, cheapest first (stable among equal costs).

    Cheap defaults first means a short job still scores several families, and the trial
    library holds diverse members before the expensive ones take their turn.
    """
    out = []
    for name in families:
        fam = get_family(name)
        if fctx.task in fam.tasks:
            out.extend((fam.cost(p, fctx), name, p) for p in fam.defaults(fctx))
    out.sort(key=lambda item: item[0])
    return [(name, params) for _, name, params in out]
