"""Persistent homology of functions on a circle, and of point clouds.

Conventions
-----------
A function on the circle is sampled at ``M`` equally spaced vertices
(``values[k]`` at phase ``k / M``). The circle is the one-dimensional complex
of those ``M`` vertices and the ``M`` edges ``(k, k+1 mod M)``. Its
superlevel-set filtration is the lower-star filtration of ``-values``: a
vertex enters at ``-values[k]``, an edge at the larger of its ends.

In that filtration

- each local maximum (a *peak*) is born in H0 at its height and dies when it
  merges into a higher peak (elder rule); the highest peak never dies;
- the one-cycle (H1) is born when the superlevel set closes around the
  circle, at the height of the lowest edge.

:class:`CircleDiagram` reports heights (not negated filtration values):
``birth >= death``, and ``persistence = birth - death``. The essential H0
class is given ``death = floor``, the height at which the cycle closes, so
that its persistence is the function's full range.

Two engines compute the same diagram: :func:`circle_diagram` with dionysus,
and :func:`circle_diagram_unionfind`, an exact union-find in O(M log M) that
serves as the fast path and as an independent check.

References
----------
- Edelsbrunner, H. & Harer, J. (2010). *Computational Topology*, AMS; the
  elder rule and lower-star filtrations (ch. VII).
- Morozov, D. dionysus 2, https://mrzv.org/software/dionysus2/.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["CircleDiagram", "circle_diagram", "circle_diagram_unionfind", "rips_diagrams", "ENGINES"]

ENGINES = ("dionysus", "unionfind")


@dataclass(frozen=True)
class CircleDiagram:
    """H0 merge tree and H1 of a function on a circle, in heights.

    Attributes
    ----------
    peaks : int array
        Vertex index of each H0 class's peak, ordered by decreasing
        persistence (the essential class first).
    births, deaths : float arrays
        Height where each peak appears and where it merges (for the
        essential class, the floor).
    floor : float
        Height at which the superlevel set closes the circle (H1 birth).
    """

    peaks: np.ndarray
    births: np.ndarray
    deaths: np.ndarray
    floor: float

    @property
    def persistence(self) -> np.ndarray:
        return self.births - self.deaths

    def pairs(self) -> np.ndarray:
        """``(birth, death)`` rows sorted, for comparing diagrams."""
        arr = np.column_stack([self.births, self.deaths])
        return arr[np.lexsort((arr[:, 1], arr[:, 0]))]


def _ordered(peaks, births, deaths, floor) -> CircleDiagram:
    peaks = np.asarray(peaks, dtype=np.int64)
    births = np.asarray(births, dtype=np.float64)
    deaths = np.asarray(deaths, dtype=np.float64)
    # Decreasing persistence; ties by height, then position, for a stable order.
    order = np.lexsort((peaks, -births, -(births - deaths)))
    return CircleDiagram(peaks[order], births[order], deaths[order], float(floor))


def circle_diagram_unionfind(values) -> CircleDiagram:
    """Superlevel-set persistence on a circle by union-find (exact).

    Examples
    --------
    >>> d = circle_diagram_unionfind([3.0, 0.0, 2.0, 1.0])
    >>> d.peaks.tolist(), d.births.tolist(), d.deaths.tolist(), d.floor
    ([0, 2], [3.0, 2.0], [0.0, 1.0], 0.0)
    """
    f = np.asarray(values, dtype=np.float64)
    m = len(f)
    if m < 3:
        raise ValueError("a circle needs at least 3 vertices")
    parent = np.full(m, -1, dtype=np.int64)  # -1: not yet in the superlevel set
    peak_of = np.arange(m)  # the peak (root label) of each root

    def find(x: int) -> int:
        root = x
        while parent[root] != root:
            root = parent[root]
        while parent[x] != root:
            parent[x], x = root, parent[x]
        return root

    peaks, births, deaths = [], [], []
    floor = None
    # Decreasing height; ties broken by index, matching a lower-star order.
    for v in np.lexsort((np.arange(m), -f)):
        v = int(v)
        parent[v] = v
        for u in ((v - 1) % m, (v + 1) % m):
            if parent[u] < 0:
                continue
            ru, rv = find(u), find(v)
            if ru == rv:
                floor = f[v]  # the edge closes the circle: H1 is born
                continue
            # Elder rule: the younger (lower) peak dies at the current height.
            pu, pv = peak_of[ru], peak_of[rv]
            older, younger = (pu, pv) if (f[pu], -pu) > (f[pv], -pv) else (pv, pu)
            if f[younger] > f[v]:  # zero-length bars (plateaus, a vertex joining its neighbour) are no peaks
                peaks.append(younger)
                births.append(f[younger])
                deaths.append(f[v])
            parent[ru] = rv
            peak_of[rv] = older
    top = int(np.argmax(f))
    if floor is None:  # pragma: no cover - a cycle graph always closes
        floor = float(f.min())
    peaks.append(top)
    births.append(f[top])
    deaths.append(floor)
    return _ordered(peaks, births, deaths, floor)


def circle_diagram(values, engine: str = "dionysus") -> CircleDiagram:
    """Superlevel-set persistence on a circle.

    Parameters
    ----------
    values : array_like of float, shape (M,)
        The function at ``M >= 3`` equally spaced points of the circle.
    engine : {"dionysus", "unionfind"}
        ``"dionysus"`` runs ``homology_persistence`` on the lower-star
        filtration of the circle complex; ``"unionfind"`` is the exact
        fast path. Both give the same diagram.

    Examples
    --------
    >>> d = circle_diagram([0.0, 1.0, 0.2, 0.9, 0.1, 0.5])
    >>> d.peaks.tolist(), [round(float(p), 3) for p in d.persistence]
    ([1, 3, 5], [1.0, 0.7, 0.4])
    """
    if engine == "unionfind":
        return circle_diagram_unionfind(values)
    if engine != "dionysus":
        raise ValueError(f"unknown persistence engine {engine!r}; choose one of {ENGINES}")
    import dionysus as d  # deferred: a compiled extension, loaded on first use

    f = np.asarray(values, dtype=np.float64)
    m = len(f)
    if m < 3:
        raise ValueError("a circle needs at least 3 vertices")
    # The lower-star filtration of the path 0..M-1 is built in C++ by
    # fill_freudenthal (a one-dimensional grid); the edge (M-1, 0) closes the
    # circle. dionysus keeps filtration values in single precision, as it
    # would for Simplex objects built one by one, and sort() orders by value,
    # then dimension, then vertices, so the filtration is the same.
    neg = (-f).astype(np.float32)
    filt = d.fill_freudenthal(neg)
    filt.append(d.Simplex([0, m - 1], float(max(neg[0], neg[m - 1]))))
    filt.sort()
    pers = d.homology_persistence(filt)
    dgms = d.init_diagrams(pers, filt)
    floor = -min(p.birth for p in dgms[1]) if len(dgms[1]) else float(f.min())
    peaks, births, deaths = [], [], []
    for p in dgms[0]:
        birth, death = -p.birth, (floor if math.isinf(p.death) else -p.death)
        if birth > death or death == floor:
            peaks.append(filt[p.data][0])
            births.append(birth)
            deaths.append(death)
    return _ordered(peaks, births, deaths, floor)


def rips_diagrams(points, max_radius: float | None = None, prime: int = 11) -> list[np.ndarray]:
    """Vietoris-Rips persistence diagrams in dimensions 0 and 1, with dionysus.

    Uses ``cohomology_persistence`` over Z/``prime`` (faster than homology on
    the same filtration; the diagrams are equal over a field).

    Parameters
    ----------
    points : array_like, shape (n, d)
    max_radius : float, optional
        Largest edge length in the filtration; by default the diameter.

    Returns
    -------
    list of two arrays of shape (k, 2)
        ``(birth, death)`` rows for H0 and H1; ``inf`` marks classes that
        never die.

    Examples
    --------
    >>> import numpy as np
    >>> theta = 2 * np.pi * np.arange(4) / 4
    >>> h1 = rips_diagrams(np.column_stack([np.cos(theta), np.sin(theta)]))[1]
    >>> np.round(h1, 4).tolist()   # [sqrt 2, 2): Adamaszek & Adams 2017
    [[1.4142, 2.0]]
    """
    import dionysus as d

    pts = np.asarray(points, dtype=np.float64)
    if pts.ndim != 2 or len(pts) < 1:
        raise ValueError("points must be an (n, d) array with n >= 1")
    if max_radius is None:
        diffs = pts[:, None, :] - pts[None, :, :]
        max_radius = float(np.sqrt((diffs ** 2).sum(-1)).max()) * 1.0001 + 1e-12
    filt = d.fill_rips(pts, 2, max_radius)
    pers = d.cohomology_persistence(filt, prime)
    dgms = d.init_diagrams(pers, filt)
    out = []
    for dim in (0, 1):
        rows = [(p.birth, p.death) for p in dgms[dim]] if dim < len(dgms) else []
        arr = np.array(rows, dtype=np.float64).reshape(-1, 2)
        arr = arr[arr[:, 1] > arr[:, 0]] if len(arr) else arr
        out.append(arr[np.lexsort((arr[:, 1], arr[:, 0]))] if len(arr) else arr)
    return out
