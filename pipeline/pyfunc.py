"""The model bundle as an MLflow pyfunc model: a DataFrame of SMILES in, the per-molecule table out."""
from __future__ import annotations

import contextvars
import math
import time
from pathlib import Path

import mlflow.pyfunc
import numpy as np
import pandas as pd

from .bundle import load_bundle, verify_bundle
from .predict import MOLECULE_COLUMNS, SeenIds, fill_id, predict_records

# Set per request by the server (pkasite.pipeline.serve): the time.monotonic() by which it must answer.
REQUEST_DEADLINE: contextvars.ContextVar[float | None] = contextvars.ContextVar("pkasite_request_deadline",
                                                                               default=None)
SERVE_CHUNK = 500  # rows scored per worker call in the server: rows finished before a time limit are kept


def serving_signature():
    """Input ``smiles`` (required), ``id`` and ``ph`` (optional); output the per-molecule table."""
    from mlflow.models import ModelSignature
    from mlflow.types import ColSpec, Schema

    def kind(c):
        if c in ("id", "smiles", "status", "macro_pkas", "macro_pkas_all", "major_species", "warnings"):
            return "string"
        return "boolean" if c == "in_domain" else "double"
    inputs = Schema([ColSpec("string", "id", required=False), ColSpec("string", "smiles"),
                     ColSpec("double", "ph", required=False)])
    return ModelSignature(inputs, Schema([ColSpec(kind(c), c, required=False) for c in MOLECULE_COLUMNS]))


def _frame_inputs(model_input: pd.DataFrame) -> tuple[list, list, float]:
    if not isinstance(model_input, pd.DataFrame) or "smiles" not in model_input.columns:
        raise ValueError("input must be a table with a 'smiles' column (optional 'id' and 'ph')")
    smiles = model_input["smiles"].tolist()
    given = model_input["id"].tolist() if "id" in model_input.columns else [None] * len(smiles)
    ids = [fill_id(v, row) for row, v in enumerate(given, 1)]  # as in pkasite predict: row<N> when missing
    ph = 7.4
    if "ph" in model_input.columns and model_input["ph"].notna().any():
        ph = float(model_input["ph"].dropna().iloc[0])
        if not math.isfinite(ph):
            raise ValueError(f"ph must be a finite number, got {ph}")
    return ids, smiles, ph


def jsonable(df: pd.DataFrame) -> pd.DataFrame:
    """``df`` with missing and non-finite numbers as None, so the JSON answer is strict JSON (null, not NaN)."""
    out = df.astype(object)
    return out.where(df.notna() & ~df.isin([np.inf, -np.inf]), None)


def predict_frame(bundle, model_input: pd.DataFrame) -> pd.DataFrame:
    ids, smiles, ph = _frame_inputs(model_input)
    mols, _ = predict_records(bundle, ids, smiles, ph=ph)
    return jsonable(mols)


class SitePkaModel(mlflow.pyfunc.PythonModel):
    """pyfunc wrapper: the bundle folder travels as the artifact ``bundle``; hashes are checked on load.

    In-process by default; after :meth:`isolate` (what ``pkasite serve`` does) every call is scored in
    worker processes, so a molecule that crashes or hangs one becomes a row with a status."""

    def load_context(self, context):
        self.bundle_path = Path(context.artifacts["bundle"])
        verify_bundle(self.bundle_path)
        self._bundle = None
        self._isolated = None

    @property
    def bundle(self):
        if self._bundle is None:
            self._bundle = load_bundle(self.bundle_path, with_tables=False)
        return self._bundle

    def isolate(self, workers: int = 1, mol_timeout: float | None = None, request_timeout: float = 60.0) -> None:
        """Score in ``workers`` worker processes (started now); each call must end within ``request_timeout``."""
        from .isolation import DEFAULT_MOL_TIMEOUT, IsolatedPredictor
        self._isolated = IsolatedPredictor(self.bundle_path, workers, mol_timeout or DEFAULT_MOL_TIMEOUT)
        self._isolated.pool.start_all()
        self._request_timeout = request_timeout

    def close(self) -> None:
        if getattr(self, "_isolated", None) is not None:
            self._isolated.close()

    def predict(self, context, model_input: pd.DataFrame, params: dict | None = None) -> pd.DataFrame:
        if getattr(self, "_isolated", None) is None:
            return predict_frame(self.bundle, model_input)
        ids, smiles, ph = _frame_inputs(model_input)
        deadline = REQUEST_DEADLINE.get() or time.monotonic() + self._request_timeout
        first = SeenIds().first_rows(ids)
        parts = [self._isolated.predict(ids[i:i + SERVE_CHUNK], smiles[i:i + SERVE_CHUNK], ph=ph,
                                        duplicate_of=first[i:i + SERVE_CHUNK], deadline=deadline).molecules
                 for i in range(0, len(ids), SERVE_CHUNK)]
        mols = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=MOLECULE_COLUMNS)
        return jsonable(mols[MOLECULE_COLUMNS])
