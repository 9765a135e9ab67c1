"""Open data sets bundled inside scikit-learn and statsmodels, for the real-data suite.

Every loader reads files shipped with the installed package (no download) and
names its source. Columns that restate the target (a log copy, the other
half of a count) are left out; large tables are subsampled to 1000 rows with
a fixed seed so the suite stays affordable on a laptop.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

#: Rows kept from the larger tables (fixed-seed sample).
SAMPLE_ROWS = 1000


@dataclass
class RealDataset:
    """A real regression or classification table and where it comes from."""

    name: str
    source: str
    X: np.ndarray
    y: np.ndarray
    feature_names: list[str]
    classification: bool
    note: str = ""
    target: str = field(default="")

    @property
    def shape(self) -> tuple[int, int]:
        return self.X.shape


def _sample(frame, seed: int = 0):
    if len(frame) <= SAMPLE_ROWS:
        return frame
    return frame.sample(SAMPLE_ROWS, random_state=seed).sort_index()


def _from_frame(name, source, frame, target, features, classification, note="", labels=None):
    X = frame[features].to_numpy(dtype=float)
    y = frame[target].to_numpy()
    y = labels(y) if labels is not None else y.astype(float)
    return RealDataset(name, source, X, y, list(features), classification, note, target)


def _statsmodels(name: str):
    import statsmodels.api as sm

    return getattr(sm.datasets, name).load_pandas().data


def diabetes() -> RealDataset:
    from sklearn.datasets import load_diabetes

    bunch = load_diabetes(as_frame=True)
    frame = bunch.frame
    return _from_frame("diabetes", "scikit-learn, sklearn.datasets.load_diabetes", frame,
                       "target", list(bunch.feature_names), False,
                       "disease progression after one year")


def star98() -> RealDataset:
    frame = _statsmodels("star98").copy()
    frame["share_above"] = frame["NABOVE"] / (frame["NABOVE"] + frame["NBELOW"])
    features = [c for c in frame.columns if c not in ("NABOVE", "NBELOW", "share_above")]
    return _from_frame("star98", "statsmodels, statsmodels.datasets.star98", frame,
                       "share_above", features, False,
                       "share of pupils above the national maths median, per district")


def anes96_party() -> RealDataset:
    frame = _statsmodels("anes96")
    features = ["popul", "TVnews", "selfLR", "ClinLR", "DoleLR", "age", "educ", "income"]
    return _from_frame("anes96 party", "statsmodels, statsmodels.datasets.anes96", frame,
                       "PID", features, False, "7-point party identification")


def fair_affairs() -> RealDataset:
    frame = _sample(_statsmodels("fair"))
    features = [c for c in frame.columns if c != "affairs"]
    return _from_frame("fair affairs", "statsmodels, statsmodels.datasets.fair", frame,
                       "affairs", features, False,
                       f"{SAMPLE_ROWS}-row sample; heavy-tailed, two thirds zeros")


def randhie_visits() -> RealDataset:
    frame = _sample(_statsmodels("randhie"))
    features = [c for c in frame.columns if c != "mdvis"]
    return _from_frame("randhie visits", "statsmodels, statsmodels.datasets.randhie", frame,
                       "mdvis", features, False,
                       f"{SAMPLE_ROWS}-row sample; counts of doctor visits, heavy-tailed")


def grunfeld_investment() -> RealDataset:
    frame = _statsmodels("grunfeld")
    return _from_frame("grunfeld", "statsmodels, statsmodels.datasets.grunfeld", frame,
                       "invest", ["value", "capital", "year"], False,
                       "gross investment of ten firms; firm identity left out")


def macro_investment() -> RealDataset:
    frame = _statsmodels("macrodata")
    features = [c for c in frame.columns if c not in ("year", "quarter", "realinv")]
    return _from_frame("macrodata investment", "statsmodels, statsmodels.datasets.macrodata",
                       frame, "realinv", features, False,
                       "quarterly US real investment; GDP accounting ties it to other columns")


def breast_cancer() -> RealDataset:
    from sklearn.datasets import load_breast_cancer

    bunch = load_breast_cancer(as_frame=True)
    return _from_frame("breast cancer", "scikit-learn, sklearn.datasets.load_breast_cancer",
                       bunch.frame, "target", list(bunch.feature_names), True,
                       "malignant or benign", labels=lambda y: np.where(
                           y == 0, "malignant", "benign").astype(object))


def wine() -> RealDataset:
    from sklearn.datasets import load_wine

    bunch = load_wine(as_frame=True)
    return _from_frame("wine", "scikit-learn, sklearn.datasets.load_wine", bunch.frame,
                       "target", list(bunch.feature_names), True, "three cultivars",
                       labels=lambda y: np.array([f"cultivar_{v}" for v in y], dtype=object))


def anes96_vote() -> RealDataset:
    frame = _statsmodels("anes96")
    features = ["popul", "TVnews", "selfLR", "ClinLR", "DoleLR", "age", "educ", "income"]
    return _from_frame("anes96 vote", "statsmodels, statsmodels.datasets.anes96", frame,
                       "vote", features, True, "vote for either major candidate",
                       labels=lambda y: np.where(y == 1, "dole", "clinton").astype(object))


def mode_choice() -> RealDataset:
    frame = _statsmodels("modechoice")
    modes = {1: "air", 2: "train", 3: "bus", 4: "car"}
    wide = frame.pivot(index="individual", columns="mode", values=["ttme", "invc", "invt", "gc"])
    wide.columns = [f"{variable}_{modes[int(mode)]}" for variable, mode in wide.columns]
    per_person = frame.groupby("individual").first()[["hinc", "psize"]]
    chosen = frame[frame["choice"] == 1].set_index("individual")["mode"].map(
        lambda mode: modes[int(mode)])
    table = wide.join(per_person).assign(chosen=chosen)
    features = [c for c in table.columns if c != "chosen"]
    return _from_frame("mode choice", "statsmodels, statsmodels.datasets.modechoice", table,
                       "chosen", features, True,
                       "travel mode chosen by each traveller (one row per person)",
                       labels=lambda y: y.astype(object))


#: The suite, regression first.
LOADERS: list[Callable[[], RealDataset]] = [
    diabetes, star98, anes96_party, fair_affairs, randhie_visits, grunfeld_investment,
    macro_investment, breast_cancer, wine, anes96_vote, mode_choice,
]


def real_datasets(names=None) -> list[RealDataset]:
    """Load the suite (or the data sets whose names are in ``names``)."""
    sets = [load() for load in LOADERS]
    if names is None:
        return sets
    return [data for data in sets if data.name in names]
