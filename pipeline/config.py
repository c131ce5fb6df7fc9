"""Run configuration and source registry: loading and validation.

One YAML file describes one run.  Unknown or ill-typed keys are errors that
name the key, so a typo never silently falls back to a default.
"""
from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Any, Literal

import yaml
from dataclasses import fields

from pydantic import BaseModel, ConfigDict, Field, ValidationError, create_model, model_validator

from pkasite.models.regressor import BoosterParams


class ConfigError(ValueError):
    """A configuration file that cannot be used; the message names the file and key."""


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class SourceFile(_Strict):
    name: str
    url: str
    sha256: str | None = None
    kind: Literal["acid", "base"] | None = None
    split: str | None = None


class Source(_Strict):
    title: str
    enabled: bool = True
    parser: str
    licence: str
    commercial_use: bool
    citation: str
    files: list[SourceFile]


class Registry(_Strict):
    version: int
    sources: dict[str, Source]

    def get(self, name: str) -> Source:
        if name not in self.sources:
            known = ", ".join(sorted(self.sources))
            raise ConfigError(f"unknown source {name!r}; the registry knows: {known}")
        return self.sources[name]


class DataConfig(_Strict):
    sources: list[str] = Field(default_factory=lambda: ["dwpka"])
    splits: list[str] = Field(default_factory=lambda: ["train", "test"])
    extra: list[str] = Field(default_factory=list)
    extra_only: bool = False


class CurationConfig(_Strict):
    temperature_min_c: float = 20.0
    temperature_max_c: float = 30.0
    keep_unknown_temperature: bool = True
    kelvin_above: float = 200.0
    pka_min: float = -2.0
    pka_max: float = 16.0
    approximate_values: Literal["keep", "reject"] = "keep"
    bound_values: Literal["keep", "reject"] = "reject"
    range_values: Literal["midpoint", "reject"] = "midpoint"
    max_range_width: float = 1.0
    first_constant_only: bool = False  # true: only each compound's strongest constant of a kind (rank 1)
    # records of these kinds from a source that draws the titrating species (ingest:
    # draws_titrating_species), drawn with n sites of their kind already charged, are at least their
    # compound's constant n + 1 of the kind
    charged_drawing_ranks: list[Literal["acid", "base"]] = Field(default_factory=lambda: ["base"])
    # such a record drawn with a charge against its kind (an acid as a cation, a base as an anion) is the
    # step out of the drawn charge (measurements: drawn_charge); false: every drawn_charge is 0
    charge_against_kind: bool = True
    # a value ranked as a later constant that only a stronger site's catalog range (widened by this many
    # log units) can hold is rejected as numbering_conflict, and one whose source-named group's site cannot
    # hold it while another site can as group_conflict; null: no check
    numbering_range_margin: float | None = 2.0
    # a record whose source names its titrating group ("COOH", "SO2-NH-") gets the one candidate site that
    # name singles out as its site atom (acid records; measurements: site_atom)
    group_sites: bool = True
    pkw: float = 14.0
    conflict_spread: float = 2.0
    conflict_action: Literal["drop", "flag"] = "drop"
    inhouse_overrides_open: bool = True
    iupac_assessments: list[str] = Field(default_factory=lambda: ["Reliable", "Approximate"])

    @model_validator(mode="after")
    def _windows(self):
        if self.temperature_min_c > self.temperature_max_c:
            raise ValueError("temperature_min_c must not exceed temperature_max_c")
        if self.pka_min >= self.pka_max:
            raise ValueError("pka_min must be below pka_max")
        return self


class FeaturesConfig(_Strict):
    radii: list[int] = Field(default_factory=lambda: [1, 2, 3])
    n_bits: int = 256
    mol_fp_bits: int = 512
    mol_fp_radius: int = 2
    use_counts: bool = True
    type_prior: bool = True    # a column with the site catalog's typical pKa of the site's type
    # sums of Hammett sigma constants on the site's aromatic ring, for sites of these kinds (FEATURES.md)
    hammett_kinds: list[Literal["acid", "base"]] = Field(default_factory=list)
    # the atoms that take up the site's charge and its lone pair by resonance (FEATURES.md)
    delocalization: bool = True


class _ModelSettings(_Strict):
    per_kind: bool = True
    censored_sites: bool = True      # a molecule's other sites of the kind enter training as one-sided bounds
    microstate_targets: bool = True  # labeled sites train on value + (site - molecule constant) offsets
    # sites of a type without training labels: shrink towards the type's catalog prior by a weight fitted
    # on the unseen-site-type CV folds, for sites of these kinds (models/prior_blend.py; needs those folds;
    # features/FEATURES.md)
    unseen_type_blend: list[Literal["acid", "base"]] = Field(default_factory=list)
    assignment_rounds: int = 3       # at most this many label re-assignment rounds (0: keep catalog priors)
    assignment_stop_fraction: float = Field(0.01, ge=0, le=1)  # stop once at most this share of labels moves
    assignment_folds: int | None = Field(3, ge=2)  # molecule-grouped folds of the rounds (None: cv.folds)
    assignment_n_estimators: int | None = 120      # cheaper boosters for the assignment rounds
    assignment_learning_rate: float | None = 0.2   # (None: the main model's settings)
    assignment_margin: float = 1.0   # a label moves only to a site predicted stronger by more than this
    assignment_tolerance: float = 2.0  # sites predicted (or, by prior, ranged) this close to the value compete


# The booster keys (n_estimators, learning_rate, ...) and their defaults come from the one place
# that defines them, models.regressor.BoosterParams.
ModelConfig = create_model(
    "ModelConfig", __base__=_ModelSettings,
    **{f.name: (type(f.default), f.default) for f in fields(BoosterParams)})


def booster_params(model: "ModelConfig", assignment: bool = False) -> BoosterParams:
    """The booster settings of the model, or of the label-assignment rounds with ``assignment``."""
    params = {f.name: getattr(model, f.name) for f in fields(BoosterParams)}
    if assignment:
        for key in ("n_estimators", "learning_rate"):
            if getattr(model, f"assignment_{key}") is not None:
                params[key] = getattr(model, f"assignment_{key}")
    return BoosterParams(**params)


class CVConfig(_Strict):
    folds: int = 5
    schemes: list[Literal["molecule", "scaffold", "site_type"]] = Field(
        default_factory=lambda: ["molecule", "scaffold", "site_type"])
    site_type_min_count: int = 40    # unseen-site-type CV holds out only types with this many labels
    site_type_folds: int = Field(5, ge=0)  # folds of the unseen-site-type scheme, each holding out a group
                                     # of types entirely; 0: one fold per type (leave-one-type-out)
    bootstrap: int = 1000
    baselines: bool = True


class DomainConfig(_Strict):
    target_rmse: float = 1.0         # in-domain predictions should meet this CV error
    min_type_support: int = 10
    # a site predicted more than this outside its type's catalog range is out of domain (None: no check)
    range_margin: float | None = Field(1.0, ge=0)
    interval_levels: list[float] = Field(default_factory=lambda: [0.8, 0.9])


class TrainConfig(_Strict):
    fit_splits: list[str] | None = None     # e.g. [train]: fit only on these file splits
    eval_splits: list[str] | None = None    # e.g. [test]: evaluate once on these
    # fit (and cross-validate) the measurements curation flags kind_suspect; false withholds them from
    # fitting and CV, never from the held-out evaluation (features/FEATURES.md: measured on CV)
    fit_kind_suspects: bool = False


class MlflowConfig(_Strict):
    enabled: bool = True
    tracking_uri: str = "sqlite:///mlflow.db"
    registered_model: str = "pkasite-site-model"
    register_model: bool = True


class RunConfig(_Strict):
    name: str = "default"
    seed: int = 42
    output_dir: str = "pkasite-out"
    data: DataConfig = Field(default_factory=DataConfig)
    curation: CurationConfig = Field(default_factory=CurationConfig)
    features: FeaturesConfig = Field(default_factory=FeaturesConfig)
    model: ModelConfig = Field(default_factory=ModelConfig)
    cv: CVConfig = Field(default_factory=CVConfig)
    domain: DomainConfig = Field(default_factory=DomainConfig)
    train: TrainConfig = Field(default_factory=TrainConfig)
    mlflow: MlflowConfig = Field(default_factory=MlflowConfig)

    def cores(self) -> int:
        """Cores this run may use (``model.n_jobs``; 0: every core this process may use): for the
        boosters and for the per-molecule work of curation and features."""
        return booster_params(self.model).workers()

    def with_overrides(self, overrides: dict[str, Any]) -> "RunConfig":
        """Return a copy with dotted keys (``"data.extra"``) replaced, validated again."""
        raw = self.model_dump()
        for dotted, value in overrides.items():
            node = raw
            *parents, leaf = dotted.split(".")
            for key in parents:
                node = node[key]
            node[leaf] = value
        return _validate(RunConfig, raw, "command-line overrides")


def _format_error(exc: ValidationError, origin: str) -> str:
    parts = []
    for err in exc.errors():
        key = ".".join(str(p) for p in err["loc"]) or "(top level)"
        msg = "unknown key" if err["type"] == "extra_forbidden" else err["msg"]
        parts.append(f"{key}: {msg}")
    return f"{origin}: " + "; ".join(parts)


def _validate(model, raw, origin: str):
    try:
        return model.model_validate(raw)
    except ValidationError as exc:
        raise ConfigError(_format_error(exc, origin)) from None


def parse_overrides(items) -> dict:
    """``KEY=VALUE`` strings (``--set`` items) as config overrides; each value is read as YAML."""
    overrides = {}
    for item in items:
        if "=" not in item:
            raise ValueError(f"{item!r} is not KEY=VALUE")
        key, value = item.split("=", 1)
        overrides[key.strip()] = yaml.safe_load(value)
    return overrides


def _read_yaml(path: Path | None, packaged: str) -> tuple[Any, str]:
    if path is None:
        text = resources.files("pkasite.configs").joinpath(packaged).read_text()
        return yaml.safe_load(text), f"packaged configs/{packaged}"
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"{path}: no such config file")
    try:
        return yaml.safe_load(path.read_text()), str(path)
    except yaml.YAMLError as exc:
        raise ConfigError(f"{path}: not valid YAML ({exc})") from None


def load_config(path: str | Path | None = None) -> RunConfig:
    """Load and validate a run config; ``None`` gives the packaged default."""
    raw, origin = _read_yaml(Path(path) if path else None, "default.yaml")
    if not isinstance(raw, dict):
        raise ConfigError(f"{origin}: the top level must be a mapping of keys")
    return _validate(RunConfig, raw, origin)


def load_registry(path: str | Path | None = None) -> Registry:
    """Load and validate the source registry; ``None`` gives the packaged one."""
    raw, origin = _read_yaml(Path(path) if path else None, "sources.yaml")
    return _validate(Registry, raw, origin)
