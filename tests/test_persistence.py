"""Persistent homology on the circle and of point clouds (metertop.persistence).

Outside references: a theorem with closed-form values (Adamaszek & Adams
2017), a general-purpose reference library (ripser.py), and an independent
algorithm (union-find against dionysus).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import ripser

from metertop.persistence import CircleDiagram, circle_diagram, circle_diagram_unionfind, rips_diagrams

# dionysus stores filtration values as float32.
F32 = dict(rtol=1e-6, atol=1e-6)
F32_APPROX = dict(rel=1e-6, abs=1e-6)


def _polygon(n: int, radius: float) -> np.ndarray:
    theta = 2 * np.pi * np.arange(n) / n
    return radius * np.column_stack([np.cos(theta), np.sin(theta)])


# ---- Vietoris-Rips of evenly spaced points on a circle ----

@pytest.mark.parametrize("radius", [1.0, 2.5])
@pytest.mark.parametrize("n", range(3, 13))
def test_rips_h1_of_evenly_spaced_circle_points(n, radius):
    """n >= 4 points on a circle of radius R: one H1 bar [2R sin(pi/n), 2R sin(pi ceil(n/3)/n)); none for n = 3.

    Adamaszek & Adams, "The Vietoris-Rips complexes of a circle", Pacific J. Math. 290 (2017), Cor. 6.7.
    """
    h0, h1 = rips_diagrams(_polygon(n, radius))
    if n == 3:
        assert len(h1) == 0
    else:
        expected = [2 * radius * math.sin(math.pi / n), 2 * radius * math.sin(math.pi * math.ceil(n / 3) / n)]
        assert h1.shape == (1, 2)
        np.testing.assert_allclose(h1[0], expected, **F32)
    # H0: n points born at 0, one class never dies, the rest die at the side length.
    assert len(h0) == n
    assert np.isinf(h0[:, 1]).sum() == 1
    np.testing.assert_allclose(h0[np.isfinite(h0[:, 1]), 1], 2 * radius * math.sin(math.pi / n), **F32)


@pytest.mark.parametrize("n, bar", [(4, (math.sqrt(2), 2.0)), (6, (1.0, math.sqrt(3))), (8, (0.7654, 1.8478))])
def test_rips_worked_values_unit_circle(n, bar):
    """Worked values on the unit circle: n=4 -> [sqrt2, 2), n=6 -> [1, sqrt3), n=8 -> [0.7654, 1.8478) (Adamaszek & Adams 2017)."""
    h1 = rips_diagrams(_polygon(n, 1.0))[1]
    np.testing.assert_allclose(h1[0], bar, atol=1e-4)


# ---- dionysus against ripser.py on the same point clouds ----

def _clouds():
    rng = np.random.default_rng(2024)
    out = []
    for k in range(3):
        theta = rng.uniform(0, 2 * np.pi, 40)
        out.append((f"noisy_circle_{k}", np.column_stack([np.cos(theta), np.sin(theta)]) + rng.normal(0, 0.06, (40, 2))))
    for k, (n, d) in enumerate([(30, 2), (35, 3), (25, 4)]):
        out.append((f"random_{k}", rng.normal(size=(n, d))))
    theta = rng.uniform(0, 2 * np.pi, 50)
    two = np.column_stack([np.cos(theta), np.sin(theta)])
    two[25:] = 0.6 * two[25:] + np.array([3.0, 0.0])
    out.append(("two_circles", two + rng.normal(0, 0.02, two.shape)))
    return out


def _sorted_bars(arr: np.ndarray, min_persistence: float = 1e-6) -> np.ndarray:
    arr = np.asarray(arr, dtype=float).reshape(-1, 2)
    arr = arr[(arr[:, 1] - arr[:, 0]) > min_persistence]
    return arr[np.lexsort((arr[:, 1], arr[:, 0]))]


@pytest.mark.parametrize("name, points", _clouds(), ids=[c[0] for c in _clouds()])
def test_rips_diagrams_equal_ripser(name, points):
    """dionysus Rips diagrams (H0 finite bars, H1 bars) equal ripser.py's on the same points (ripser.py, Tralie, Saul & Bar-On, JOSS 2018)."""
    ours = rips_diagrams(points)
    ref = ripser.ripser(points, maxdim=1)["dgms"]
    h0_ours = _sorted_bars(ours[0][np.isfinite(ours[0][:, 1])])
    h0_ref = _sorted_bars(ref[0][np.isfinite(ref[0][:, 1])])
    assert h0_ours.shape == h0_ref.shape
    np.testing.assert_allclose(h0_ours, h0_ref, **F32)
    assert np.isinf(ours[0][:, 1]).sum() == np.isinf(ref[0][:, 1]).sum() == 1
    h1_ours, h1_ref = _sorted_bars(ours[1]), _sorted_bars(ref[1])
    assert h1_ours.shape == h1_ref.shape
    np.testing.assert_allclose(h1_ours, h1_ref, **F32)
    if name.startswith("two_circles"):
        assert (np.diff(h1_ref, axis=1) > 0.5).sum() == 2  # both loops are found


# ---- circle merge trees: dionysus against union-find ----

def _random_functions():
    rng = np.random.default_rng(7)
    out = []
    sizes = list(range(3, 13)) + [16, 24, 48, 96, 137, 200]
    for i, m in enumerate(sizes * 6):
        kind = i % 6
        if kind == 0:
            f = rng.normal(size=m)
        elif kind == 1:  # many ties
            f = rng.integers(0, 4, size=m).astype(float)
        elif kind == 2:  # coarse rounding: ties and plateaus
            f = np.round(rng.normal(size=m), 1)
        elif kind == 3:  # plateaus of three
            f = np.repeat(rng.normal(size=(m + 2) // 3), 3)[:m]
        elif kind == 4:  # a smooth density with bumps, like the scan's
            x = np.arange(m) / m
            centres = rng.uniform(0, 1, 4)
            f = sum(rng.uniform(0.2, 1) * np.exp(-0.5 * ((((x - c) + 0.5) % 1 - 0.5) / 0.05) ** 2) for c in centres)
        else:  # non-negative with exact zeros
            f = np.maximum(rng.normal(size=m), 0.0)
        out.append(np.asarray(f, dtype=float))
    return out


FUNCTIONS = _random_functions()


def test_dionysus_and_unionfind_give_the_same_circle_diagram():
    """On many random circle functions (M = 3..200, with ties and plateaus) both engines give equal bars and floor."""
    unique_peaks_checked = 0
    for f in FUNCTIONS:
        a = circle_diagram(f, engine="dionysus")
        b = circle_diagram(f, engine="unionfind")
        pa, pb = a.pairs(), b.pairs()
        assert pa.shape == pb.shape, f
        np.testing.assert_allclose(pa, pb, **F32)
        assert a.floor == pytest.approx(b.floor, **F32_APPROX)
        # Peak positions agree for the top bars whose persistence and height are unique.
        pers = b.persistence
        for i in range(min(4, len(pers))):
            others = np.delete(pers, i)
            if np.all(np.abs(others - pers[i]) > 1e-4) and np.sum(np.isclose(f, b.births[i], rtol=0, atol=1e-9)) == 1:
                j = int(np.argmin(np.abs(a.persistence - pers[i])))
                assert a.peaks[j] == b.peaks[i]
                unique_peaks_checked += 1
    assert unique_peaks_checked > 100


def test_unknown_engine_and_tiny_circle_are_value_errors():
    """An unknown engine name, or fewer than 3 vertices, is a ValueError."""
    with pytest.raises(ValueError):
        circle_diagram([1.0, 2.0, 3.0], engine="nope")
    for engine in ("dionysus", "unionfind"):
        with pytest.raises(ValueError):
            circle_diagram([1.0, 2.0], engine=engine)


# ---- tiny cases computed by hand ----

@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
def test_hand_computed_four_vertex_circle(engine):
    """[3, 0, 2, 1]: peaks at 0 and 2, bars (3, 0) essential and (2, 1), floor 0 (by hand: 2 merges into 3 at height 1)."""
    d = circle_diagram([3.0, 0.0, 2.0, 1.0], engine=engine)
    assert d.peaks.tolist() == [0, 2]
    np.testing.assert_allclose(d.births, [3.0, 2.0])
    np.testing.assert_allclose(d.deaths, [0.0, 1.0])
    assert d.floor == 0.0
    np.testing.assert_allclose(d.persistence, [3.0, 1.0])


@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
def test_hand_computed_three_peaks(engine):
    """[0, 5, 1, 4, 2, 3]: peak 5 is essential, 4 dies at 1, 3 dies at 2 (elder rule, by hand)."""
    d = circle_diagram([0.0, 5.0, 1.0, 4.0, 2.0, 3.0], engine=engine)
    assert d.peaks.tolist() == [1, 3, 5]
    np.testing.assert_allclose(d.births, [5.0, 4.0, 3.0])
    np.testing.assert_allclose(d.deaths, [0.0, 1.0, 2.0])


@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
@pytest.mark.parametrize("m", [3, 7, 48])
def test_constant_function_has_one_essential_class(engine, m):
    """A constant function has a single class, essential, of persistence 0."""
    d = circle_diagram(np.full(m, 0.7), engine=engine)
    assert len(d.peaks) == 1
    assert d.births[0] == pytest.approx(0.7) and d.deaths[0] == pytest.approx(0.7)
    assert d.floor == pytest.approx(0.7)


@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
def test_essential_persistence_is_the_range(engine):
    """The essential class lives from the maximum to the floor, which is the minimum: persistence = max - min."""
    for f in FUNCTIONS[::5]:
        d = circle_diagram(f, engine=engine)
        assert d.persistence[0] == pytest.approx(f.max() - f.min(), **F32_APPROX)
        assert d.floor == pytest.approx(f.min(), **F32_APPROX)
        assert f[d.peaks[0]] == pytest.approx(f.max())
        assert np.all(np.diff(d.persistence) <= 1e-6)  # ordered by decreasing persistence
        assert np.all(d.persistence[1:] > 0)  # no zero-length bars besides, perhaps, the essential one


# ---- invariances ----

@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
def test_rotation_rotates_peaks_and_keeps_the_diagram(engine):
    """Rotating the values around the circle rotates the peaks by the same step and keeps the diagram."""
    rng = np.random.default_rng(3)
    for _ in range(20):
        m = int(rng.integers(5, 80))
        f = rng.normal(size=m)
        k = int(rng.integers(1, m))
        a = circle_diagram(f, engine=engine)
        b = circle_diagram(np.roll(f, k), engine=engine)
        np.testing.assert_allclose(a.pairs(), b.pairs(), **F32)
        assert a.floor == pytest.approx(b.floor)
        # With distinct values every bar is unique, so peaks map one to one.
        assert ((a.peaks + k) % m).tolist() == b.peaks.tolist()


@pytest.mark.parametrize("engine", ["dionysus", "unionfind"])
def test_adding_a_constant_shifts_births_and_deaths(engine):
    """Adding c to the function adds c to every birth, death and the floor; persistence is unchanged."""
    rng = np.random.default_rng(4)
    for _ in range(20):
        f = rng.normal(size=int(rng.integers(3, 60)))
        c = float(rng.uniform(-3, 3))
        a = circle_diagram(f, engine=engine)
        b = circle_diagram(f + c, engine=engine)
        np.testing.assert_allclose(b.pairs(), a.pairs() + c, rtol=1e-5, atol=1e-5)
        assert b.floor == pytest.approx(a.floor + c, rel=1e-5, abs=1e-5)
        np.testing.assert_allclose(b.persistence, a.persistence, rtol=1e-5, atol=1e-5)
        assert b.peaks.tolist() == a.peaks.tolist()


def test_unionfind_returns_a_circle_diagram():
    """The union-find path returns the same dataclass with parallel arrays."""
    d = circle_diagram_unionfind([0.0, 1.0, 0.2, 0.9, 0.1, 0.5])
    assert isinstance(d, CircleDiagram)
    assert len(d.peaks) == len(d.births) == len(d.deaths) == 3


def test_circle_filtration_equals_the_one_built_simplex_by_simplex():
    """circle_diagram's filtration (dionysus's fill_freudenthal on the path, plus the closing edge) is, simplex for
    simplex and value for value, the lower-star filtration of the circle built one Simplex at a time."""
    import dionysus as d

    for f in FUNCTIONS[:300]:
        m = len(f)
        neg = -np.asarray(f, dtype=np.float64)
        by_hand = d.Filtration([d.Simplex([k], neg[k]) for k in range(m)]
                               + [d.Simplex([k, (k + 1) % m], max(neg[k], neg[(k + 1) % m])) for k in range(m)])
        by_hand.sort()
        neg32 = neg.astype(np.float32)
        filled = d.fill_freudenthal(neg32)
        filled.append(d.Simplex([0, m - 1], float(max(neg32[0], neg32[m - 1]))))
        filled.sort()
        assert [(sorted(s), s.data) for s in by_hand] == [(sorted(s), s.data) for s in filled]
