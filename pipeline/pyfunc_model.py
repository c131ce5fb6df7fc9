"""Model-from-code entry point for MLflow: logging this file (not a pickled object) defines the model."""
import mlflow

from pkasite.pipeline.pyfunc import SitePkaModel

mlflow.models.set_model(SitePkaModel())
