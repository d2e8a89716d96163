"""Write results: JSON Lines.

Conventions
-----------
One JSON object per tune, one line each, with the keys of
:meth:`metertop.result.MetreResult.to_dict` (DESIGN.md section 5).
"""

from __future__ import annotations

import json

from .result import MetreResult

__all__ = ["to_json_line"]


def to_json_line(result: MetreResult, **extra) -> str:
    """One compact JSON line for a result; ``extra`` keys are appended.

    Examples
    --------
    >>> import numpy as np, json
    >>> from metertop import analyse, notes_from_onsets
    >>> r = analyse(notes_from_onsets(np.arange(32) * 0.5, np.tile([3.0, 1, 1, 1], 8)))
    >>> json.loads(to_json_line(r, path="x.csv"))["path"]
    'x.csv'
    """
    data = result.to_dict()
    data.update(extra)
    return json.dumps(data, separators=(",", ":"), allow_nan=False)
