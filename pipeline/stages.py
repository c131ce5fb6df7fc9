"""Wall time and booster fits per named stage of a run, with one progress line per stage."""
from __future__ import annotations

import time
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Callable, Iterator

import pandas as pd

from pkasite.models.regressor import boosters_fitted


@dataclass
class StageRecord:
    name: str
    seconds: float = 0.0
    fits: int = 0
    note: str = ""


class StageClock:
    """Times the stages of a run: ``with clock("cv molecule") as st: ...; st.note = "RMSE 1.2"``.

    Each finished stage logs ``[elapsed] name: note (seconds, fits)``; :meth:`table` lists them all.
    """

    def __init__(self, log: Callable[[str], None] = lambda m: None):
        self.log = log
        self.start = time.monotonic()
        self.records: list[StageRecord] = []

    def elapsed(self) -> float:
        return time.monotonic() - self.start

    @contextmanager
    def __call__(self, name: str) -> Iterator[StageRecord]:
        rec = StageRecord(name)
        t0, f0 = time.monotonic(), boosters_fitted()
        yield rec
        rec.seconds = time.monotonic() - t0
        rec.fits += boosters_fitted() - f0  # a stage may add fits made for it in another thread
        self.records.append(rec)
        fits = f", {rec.fits} booster fits" if rec.fits else ""
        self.log(f"[{self.elapsed():6.1f} s] {name}" + (f": {rec.note}" if rec.note else "")
                 + f" ({rec.seconds:.1f} s{fits})")

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([{"stage": r.name, "seconds": round(r.seconds, 2), "fits": r.fits}
                             for r in self.records], columns=["stage", "seconds", "fits"])
