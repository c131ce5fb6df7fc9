"""Gradient-boosted site regressor (LightGBM), stored as LightGBM text models, never pickles."""
from __future__ import annotations

from dataclasses import asdict, dataclass, field

import lightgbm as lgb
import numpy as np

KINDS = ("acid", "base")


@dataclass(frozen=True)
class BoosterParams:
    n_estimators: int = 700
    learning_rate: float = 0.04
    num_leaves: int = 48
    min_child_samples: int = 8
    colsample_bytree: float = 0.4
    subsample: float = 0.8
    reg_lambda: float = 1.0
    n_jobs: int = 2

    def lgb_params(self, seed: int) -> dict:
        p = asdict(self)
        n = p.pop("n_estimators")
        return {"objective": "regression", "learning_rate": p["learning_rate"], "num_leaves": p["num_leaves"],
                "min_data_in_leaf": p["min_child_samples"], "feature_fraction": p["colsample_bytree"],
                "bagging_fraction": p["subsample"], "bagging_freq": 1, "lambda_l2": p["reg_lambda"],
                "num_threads": p["n_jobs"], "seed": seed, "deterministic": True, "force_row_wise": True,
                "verbosity": -1, "num_iterations": n}


@dataclass
class SiteRegressor:
    """Predicts site pKa from site features; one booster per kind or one shared booster.

    Follows the scikit-learn contract: the constructor stores parameters only,
    :meth:`fit` learns, :meth:`predict` needs a fitted model.
    """

    params: BoosterParams = field(default_factory=BoosterParams)
    per_kind: bool = True
    seed: int = 42
    boosters_: dict = field(default_factory=dict, init=False, repr=False)

    def _key(self, kind: str) -> str:
        return kind if self.per_kind else "all"

    def fit(self, X: np.ndarray, y: np.ndarray, kinds: np.ndarray, only_kinds=None) -> "SiteRegressor":
        """Fit the booster(s); ``only_kinds`` limits per-kind fitting to the kinds that will be predicted."""
        X, y, kinds = np.asarray(X, np.float32), np.asarray(y, float), np.asarray(kinds)
        if len(X) != len(y) or len(y) != len(kinds):
            raise ValueError(f"X, y and kinds differ in length ({len(X)}, {len(y)}, {len(kinds)})")
        self.boosters_ = {}
        keys = tuple(k for k in KINDS if only_kinds is None or k in only_kinds) if self.per_kind else ("all",)
        for key in keys:
            mask = (kinds == key) if self.per_kind else np.ones(len(y), bool)
            if mask.sum() < 2:
                continue
            data = lgb.Dataset(X[mask], y[mask], free_raw_data=True, params={"verbosity": -1})
            self.boosters_[key] = lgb.train(self.params.lgb_params(self.seed), data)
        if not self.boosters_:
            raise ValueError("no kind has enough training rows")
        return self

    def _check_fitted(self):
        if not self.boosters_:
            raise RuntimeError("SiteRegressor is not fitted; call fit() or load a bundle first")

    def predict(self, X: np.ndarray, kinds: np.ndarray, contrib: bool = False) -> np.ndarray:
        """Predicted pKa per row (NaN for a kind without a model); with ``contrib`` SHAP-style contributions."""
        self._check_fitted()
        X, kinds = np.asarray(X, np.float32), np.asarray(kinds)
        width = X.shape[1] + 1
        out = np.full((len(X), width) if contrib else len(X), np.nan)
        for key, booster in self.boosters_.items():
            mask = (kinds == key) if self.per_kind else np.ones(len(X), bool)
            if mask.any():
                out[mask] = booster.predict(X[mask], pred_contrib=contrib)
        return out

    def to_strings(self) -> dict[str, str]:
        self._check_fitted()
        return {k: b.model_to_string() for k, b in self.boosters_.items()}

    @classmethod
    def from_strings(cls, models: dict[str, str], per_kind: bool, seed: int = 42,
                     params: BoosterParams | None = None) -> "SiteRegressor":
        reg = cls(params=params or BoosterParams(), per_kind=per_kind, seed=seed)
        reg.boosters_ = {k: lgb.Booster(model_str=s) for k, s in models.items()}
        return reg
