"""metertop: the metre of music from its note onsets, found with persistent homology.

>>> import metertop
>>> "analyse" in metertop.__all__
True
"""

from ._version import __version__
from .errors import InputError, MetertopError
from .load import NoteTable, load_notes, notes_from_onsets
from .pipeline import Settings, analyse, analyse_detailed
from .result import Level, MetreResult, Reading, Segment

__all__ = [
    "__version__",
    "analyse",
    "analyse_detailed",
    "Settings",
    "MetreResult",
    "Level",
    "Reading",
    "Segment",
    "NoteTable",
    "load_notes",
    "notes_from_onsets",
    "MetertopError",
    "InputError",
]
