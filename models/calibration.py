"""Split-conformal prediction intervals from cross-validation residuals.

Absolute out-of-fold residuals are grouped (by applicability-domain bin, for
example); the interval half-width for a nominal level is the finite-sample
conformal quantile of the residuals of the row's group, or of all residuals
when the group is too small.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


def conformal_quantile(abs_residuals: np.ndarray, level: float) -> float:
    r = np.sort(np.asarray(abs_residuals, float))
    n = len(r)
    if n == 0:
        raise ValueError("no residuals to calibrate on")
    k = int(np.ceil((n + 1) * level)) - 1
    return float(r[min(k, n - 1)])


@dataclass
class ConformalCalibrator:
    levels: tuple[float, ...] = (0.8, 0.9)
    min_group: int = 50
    widths_: dict = field(default_factory=dict, init=False)

    def fit(self, abs_residuals, groups) -> "ConformalCalibrator":
        r = np.abs(np.asarray(abs_residuals, float))
        groups = np.asarray(groups).astype(str)
        self.widths_ = {"*": {str(lv): conformal_quantile(r, lv) for lv in self.levels}}
        for g in np.unique(groups):
            sel = r[groups == g]
            if len(sel) >= self.min_group:
                self.widths_[g] = {str(lv): conformal_quantile(sel, lv) for lv in self.levels}
        return self

    def half_width(self, groups, level: float) -> np.ndarray:
        if not self.widths_:
            raise RuntimeError("ConformalCalibrator is not fitted")
        key = str(level)
        if key not in self.widths_["*"]:
            raise ValueError(f"level {level} was not calibrated; calibrated: {sorted(self.widths_['*'])}")
        return np.array([self.widths_.get(g, self.widths_["*"])[key] for g in np.asarray(groups).astype(str)])

    def to_dict(self) -> dict:
        return {"levels": list(self.levels), "min_group": self.min_group, "widths": self.widths_}

    @classmethod
    def from_dict(cls, d: dict) -> "ConformalCalibrator":
        cal = cls(levels=tuple(d["levels"]), min_group=d["min_group"])
        cal.widths_ = d["widths"]
        return cal
