"""Shrinking predictions for sites of unseen types towards the type's catalog prior."""
from __future__ import annotations

import numpy as np
import pytest

from pkasite.models.prior_blend import blend, prior_weight, prior_weights


def test_weight_is_the_least_squares_mix_of_model_and_prior():
    rng = np.random.default_rng(0)
    model, prior = rng.normal(5, 2, 200), rng.normal(5, 2, 200)
    target = 0.7 * model + 0.3 * prior
    assert prior_weight(model, prior, target) == pytest.approx(0.7)
    # with noise the estimate stays close and is the minimiser of the squared error
    noisy = target + rng.normal(0, 0.5, 200)
    w = prior_weight(model, prior, noisy)
    err = [np.mean((v * model + (1 - v) * prior - noisy) ** 2) for v in (w - 0.05, w, w + 0.05)]
    assert err[1] < err[0] and err[1] < err[2]


def test_weight_is_clipped_and_defaults_to_the_model():
    model, prior = np.array([1.0, 2.0, 3.0]), np.array([0.0, 0.0, 0.0])
    assert prior_weight(model, prior, 3 * model) == 1.0        # beyond the model: clipped
    assert prior_weight(model, prior, -model) == 0.0           # opposite of the model: clipped
    assert prior_weight([], [], []) == 1.0                     # nothing to weigh
    assert prior_weight(model, model, prior) == 1.0            # model and prior agree everywhere
    assert prior_weight([1.0, np.nan], [0.0, 0.0], [0.5, 9.0]) == pytest.approx(0.5)  # NaN rows ignored


def test_weights_are_per_kind():
    model = np.array([2.0, 4.0, 10.0, 8.0])
    prior = np.array([0.0, 0.0, 0.0, 0.0])
    target = np.array([1.0, 2.0, 10.0, 8.0])
    kinds = np.array(["acid", "acid", "base", "base"])
    assert prior_weights(model, prior, target, kinds) == pytest.approx({"acid": 0.5, "base": 1.0})


def test_blend_touches_only_unseen_rows_with_a_prior():
    pred = np.array([4.0, 4.0, 4.0, 9.0])
    prior = np.array([2.0, 2.0, np.nan, 11.0])
    unseen = np.array([True, False, True, True])
    kinds = np.array(["acid", "acid", "acid", "base"])
    out = blend(pred, prior, unseen, kinds, {"acid": 0.75, "base": 0.5})
    assert out.tolist() == [3.5, 4.0, 4.0, 10.0]
    assert pred.tolist() == [4.0, 4.0, 4.0, 9.0]  # the input is not modified
    assert blend(pred, prior, unseen, kinds, None).tolist() == pred.tolist()
