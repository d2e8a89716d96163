"""The reading model: a linear score over the persistence evidence of a reading.

Conventions
-----------
A reading (a path through the cycle lattice, with a downbeat) is described
by named features (:data:`FEATURES`). Its score is ``sum(w[f] * x[f])`` and
the probabilities of the readings of one piece are ``softmax(score / T)``:
a conditional logit model.

- Persistence evidence (read off merge trees of wrapped densities):
  ``bar``, ``half_bar``, ``double_bar``, ``beat``, ``division``,
  ``unexplained`` (see :mod:`metertop.tree`), and ``beat_salience``, the
  pulse scan's essential-class salience at the reading's beat period,
  relative to the best period's (:meth:`metertop.tempo.PulseTrack.salience_profile`).
- Occupancy: ``support``, the log share of downbeats that carry an onset.
- Tempo: ``log_beat`` and ``log_beat_sq``, the beat period in octaves from
  0.6 s and its square.
- The reading's shape: ``compound``, ``single``, ``irregular``, ``beats2`` to
  ``beats5``, ``compound_unheard`` (a compound beat without evidence of its
  division), and for drum kits ``drums_beats2``, ``drums_beats4``,
  ``drums_compound`` and the evidence again (``drums_bar``, ...), so that
  drum grooves can weigh it differently from melodies.
- Repetition, for drum kits: ``drums_repeat``, the share of each key's
  notes that recur one bar later (:mod:`metertop.repetition`), and
  ``drums_repeat_double``, what a bar of twice the length adds to it, and
  ``drums_repeat_half``, what a bar of two or four beats adds to its half
  (with nothing added, the shorter bar is the simpler reading).

The coefficients ship as JSON in ``metertop/data/reading_model.json``. The
file in the repository was fitted by ``bench/train.py`` on the training
files of the development corpus only; :data:`HAND_SET` holds the
hand-set weights the fit started from, for comparison.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources

import numpy as np

__all__ = ["FEATURES", "PERSISTENCE_FEATURES", "ReadingModel", "default_model", "HAND_SET"]

# The persistence evidence, and the same evidence again for drum kits.
PERSISTENCE_FEATURES = ("bar", "half_bar", "double_bar", "beat", "division", "unexplained", "beat_salience",
                        "drums_bar", "drums_half_bar", "drums_double_bar", "drums_beat", "drums_division")
FEATURES = PERSISTENCE_FEATURES + (
    "support", "log_beat", "log_beat_sq",
    "compound", "single", "irregular", "beats2", "beats3", "beats4", "beats5",
    "compound_unheard", "drums_beats2", "drums_beats4", "drums_compound",
    "drums_repeat", "drums_repeat_double", "drums_repeat_half",
)

# The weights chosen by hand before any fit (see docs/method.md).
HAND_SET = {
    "weights": {"bar": 1.0, "half_bar": 0.6, "beat": 0.6, "division": 0.35, "unexplained": -1.0, "support": 0.5,
                "log_beat": 0.0, "log_beat_sq": -0.4, "single": -0.15, "irregular": -0.15,
                "compound_unheard": -0.1, "drums_beats2": -0.2, "drums_repeat": 2.0, "drums_repeat_double": -1.0,
                "drums_repeat_half": 0.25},
    "temperature": 0.12,
    "fitted_on": "hand-set",
}


@dataclass(frozen=True)
class ReadingModel:
    """Coefficients of the reading score.

    Attributes
    ----------
    weights : dict
        Feature name to coefficient; missing features weigh 0.
    temperature : float
        Softmax temperature (1 for a fitted model).
    fitted_on : str
        Where the coefficients come from.
    """

    weights: dict = field(default_factory=lambda: dict(HAND_SET["weights"]))
    temperature: float = HAND_SET["temperature"]
    fitted_on: str = "hand-set"

    def __post_init__(self) -> None:
        unknown = set(self.weights) - set(FEATURES)
        if unknown:
            raise ValueError(f"unknown reading features: {sorted(unknown)}")
        if not self.temperature > 0:
            raise ValueError("temperature must be positive")

    def vector(self) -> np.ndarray:
        """Coefficients in the order of :data:`FEATURES`."""
        return np.array([self.weights.get(f, 0.0) for f in FEATURES])

    def score(self, features: dict) -> float:
        """Linear score of one reading's features."""
        return float(sum(self.weights.get(k, 0.0) * v for k, v in features.items()))

    def probabilities(self, scores) -> np.ndarray:
        """Softmax of the scores at the model's temperature."""
        s = np.asarray(scores, dtype=np.float64)
        p = np.exp((s - s.max()) / self.temperature)
        return p / p.sum()

    def to_json(self) -> str:
        return json.dumps({"weights": self.weights, "temperature": self.temperature, "fitted_on": self.fitted_on}, indent=1)

    @classmethod
    def from_dict(cls, data: dict) -> "ReadingModel":
        return cls(weights=dict(data["weights"]), temperature=float(data["temperature"]), fitted_on=str(data.get("fitted_on", "")))


@lru_cache(maxsize=1)
def default_model() -> ReadingModel:
    """The shipped model (``metertop/data/reading_model.json``), or the hand-set weights if it is absent.

    >>> default_model().temperature > 0
    True
    """
    try:
        text = resources.files("metertop").joinpath("data/reading_model.json").read_text()
    except (FileNotFoundError, ModuleNotFoundError):
        return ReadingModel()
    return ReadingModel.from_dict(json.loads(text))
