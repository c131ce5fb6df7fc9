"""The model bundle as an MLflow pyfunc model: a DataFrame of SMILES in, the per-molecule table out."""
from __future__ import annotations

from pathlib import Path

import mlflow.pyfunc
import pandas as pd

from .bundle import load_bundle
from .predict import predict_records


def _frame_inputs(model_input: pd.DataFrame) -> tuple[list, list, float]:
    if not isinstance(model_input, pd.DataFrame) or "smiles" not in model_input.columns:
        raise ValueError("input must be a table with a 'smiles' column (optional 'id' and 'ph')")
    smiles = model_input["smiles"].tolist()
    ids = model_input["id"].astype(str).tolist() if "id" in model_input.columns else [str(i) for i in range(len(smiles))]
    ph = float(model_input["ph"].iloc[0]) if "ph" in model_input.columns and len(model_input) else 7.4
    return ids, smiles, ph


def predict_frame(bundle, model_input: pd.DataFrame) -> pd.DataFrame:
    ids, smiles, ph = _frame_inputs(model_input)
    mols, _ = predict_records(bundle, ids, smiles, ph=ph)
    return mols


def predict_frame_from_path(path: Path, model_input: pd.DataFrame) -> pd.DataFrame:
    return predict_frame(load_bundle(path), model_input)


class SitePkaModel(mlflow.pyfunc.PythonModel):
    """pyfunc wrapper: the bundle folder travels as the artifact ``bundle``; hashes are checked on load."""

    def load_context(self, context):
        self.bundle = load_bundle(Path(context.artifacts["bundle"]))

    def predict(self, context, model_input: pd.DataFrame, params: dict | None = None) -> pd.DataFrame:
        return predict_frame(self.bundle, model_input)
