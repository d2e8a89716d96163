"""The reading model: features, JSON round trip, probabilities."""

from __future__ import annotations

import json

import numpy as np
import pytest

from metertop.model import FEATURES, HAND_SET, PERSISTENCE_FEATURES, ReadingModel, default_model


def test_shipped_model_uses_known_features_and_a_positive_temperature():
    """The JSON in metertop/data names only known features."""
    model = default_model()
    assert set(model.weights) <= set(FEATURES)
    assert model.temperature > 0
    assert model.fitted_on


def test_json_round_trip():
    """to_json and from_dict give the same model."""
    model = ReadingModel(weights={"bar": 1.5, "beat": -0.25}, temperature=0.5, fitted_on="test")
    again = ReadingModel.from_dict(json.loads(model.to_json()))
    assert again == model


def test_unknown_feature_is_rejected():
    with pytest.raises(ValueError, match="unknown reading features"):
        ReadingModel(weights={"loudness": 1.0})


def test_score_is_linear_and_missing_features_weigh_nothing():
    """score(x) = sum w_f x_f over the features given."""
    model = ReadingModel(weights={"bar": 2.0, "support": 0.5}, temperature=1.0)
    assert model.score({"bar": 0.25, "support": -1.0, "beat": 9.0}) == pytest.approx(2.0 * 0.25 - 0.5)
    assert model.vector()[FEATURES.index("bar")] == 2.0


def test_probabilities_are_a_softmax_at_the_temperature():
    """Doubling the temperature halves the log-odds."""
    scores = [1.0, 0.0, -1.0]
    p1 = ReadingModel(temperature=1.0).probabilities(scores)
    p2 = ReadingModel(temperature=2.0).probabilities(scores)
    assert p1.sum() == pytest.approx(1.0) and p2.sum() == pytest.approx(1.0)
    assert np.log(p1[0] / p1[1]) == pytest.approx(1.0)
    assert np.log(p2[0] / p2[1]) == pytest.approx(0.5)


def test_hand_set_weights_reward_persistence_evidence():
    """The hand-set model prefers more bar and beat evidence and penalises unexplained persistence."""
    w = HAND_SET["weights"]
    assert w["bar"] > 0 and w["beat"] > 0 and w["unexplained"] < 0
    assert set(PERSISTENCE_FEATURES) <= set(FEATURES)
