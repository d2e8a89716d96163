"""Cycle scan: wrap onsets onto circles and score the persistence at each length.

Conventions
-----------
- Positions are in any unit with a fixed step: seconds for the pulse search,
  warped *pulse time* (tracked pulses at the integers) for the bar search.
- Wrapping at cycle length ``L``: ``phase = (position mod L) / L`` in [0, 1).
- The wrapped density is the accent-weighted sum of circular Gaussian bumps,
  sampled at ``M`` bins, divided by the number of cycles that the onsets
  span, so that one onset of weight 1 in every cycle at the same phase gives
  a peak of height 1 (an *occupancy* scale).
- Its superlevel-set persistence (:mod:`metertop.persistence`) is the
  merge tree: the essential peak is the most persistent position of the
  cycle (the downbeat at bar length), and its persistence is the full range
  of the density, from the top to the floor where the one-cycle is born.

The scan's score at a length is the *dominance* of the essential peak over
the next most persistent one, ``(p1 - p2) / p1``; it is high where one
position per cycle stands out and low at lengths that smear the onsets or that
repeat a shorter cycle (two equal downbeats per cycle).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .persistence import CircleDiagram, circle_diagram

__all__ = ["WrappedCycle", "wrapped_density", "circular_bumps", "refined_phases", "wrap_cycle", "wrap_cycles", "scan_lengths"]

_OVERSAMPLE = 4


_KERNELS: dict = {}


def _kernel_spectrum(fine: int, widths: np.ndarray) -> np.ndarray:
    """FFT of the sampled circular Gaussian bumps, one row per width (cached: windows reuse them)."""
    key = (fine, widths.tobytes())
    spectrum = _KERNELS.get(key)
    if spectrum is None:
        d = np.arange(fine) / fine
        d = np.minimum(d, 1.0 - d)
        spectrum = np.fft.rfft(np.exp(-0.5 * (d[None, :] / widths[:, None]) ** 2), axis=1)
        if len(_KERNELS) > 256:
            _KERNELS.clear()
        _KERNELS[key] = spectrum
    return spectrum


def circular_bumps(phases, weights, n_bins: int, widths) -> np.ndarray:
    """Sums of weighted Gaussian bumps on the circle, for several bump widths at once.

    Equivalent to ``sum_i w_i exp(-d(k/M, phase_i)**2 / (2 width**2))`` with
    ``d`` the circular distance, evaluated at ``M = n_bins`` points, but
    computed in O(n + M log M) per row: the phases are spread linearly onto a
    grid four times finer and convolved with the sampled bump by FFT.

    Parameters
    ----------
    phases : array_like, shape (n,) or (n, J)
        Phases in cycles (any real numbers; taken mod 1). One column per row
        of the output.
    weights : array_like, shape (n,)
    n_bins : int
    widths : float or array_like, shape (J,)
        Bump standard deviation of each row, in cycles.

    Returns
    -------
    ndarray, shape (M,) for 1-d phases, else (J, M)

    Examples
    --------
    >>> f = circular_bumps([0.25], [1.0], 8, 0.05)
    >>> int(np.argmax(f)), round(float(f.max()), 3)
    (2, 1.0)
    """
    ph = np.asarray(phases, dtype=np.float64)
    one = ph.ndim == 1
    out = _clear_ripples(_bumps(ph[:, None] if one else ph, weights, n_bins, widths))
    return out[0] if one else out


def _clear_ripples(out: np.ndarray) -> np.ndarray:
    """``out`` with its rounding ripples set to 0 in place: values within 1e-12 of its largest magnitude.

    Rounding leaves +-1e-16 ripples in empty stretches, which would count as peaks.
    """
    out[np.abs(out) <= 1e-12 * max(float(np.abs(out).max()), 1e-300)] = 0.0
    return out


def _bumps(ph: np.ndarray, weights, n_bins: int, widths) -> np.ndarray:
    """:func:`circular_bumps` of 2-d phases, before the ripples are cleared."""
    n, j = ph.shape
    w = np.asarray(weights, dtype=np.float64)
    widths = np.broadcast_to(np.asarray(widths, dtype=np.float64), (j,))
    fine = n_bins * _OVERSAMPLE
    pos = np.mod(ph, 1.0) * fine
    lo = np.floor(pos).astype(np.int64)
    frac = pos - lo
    rows = np.broadcast_to(np.arange(j)[None, :], (n, j))
    base = rows * fine
    index = np.concatenate(((base + lo % fine).ravel(), (base + (lo + 1) % fine).ravel()))
    mass = np.concatenate(((w[:, None] * (1 - frac)).ravel(), (w[:, None] * frac).ravel()))
    hist = np.bincount(index, weights=mass, minlength=j * fine).reshape(j, fine)
    return np.fft.irfft(np.fft.rfft(hist, axis=1) * _kernel_spectrum(fine, widths), n=fine, axis=1)[:, ::_OVERSAMPLE]


def wrapped_density(positions, weights, length: float, n_bins: int, width: float, span: float | None = None) -> np.ndarray:
    """Accent-weighted density of the phases at cycle ``length``.

    Parameters
    ----------
    positions, weights : array_like, shape (n,)
        Onset positions and their weights.
    length : float
        Cycle length, in the unit of ``positions``.
    n_bins : int
        Number of bins ``M`` on the circle.
    width : float
        Standard deviation of each bump, as a fraction of the cycle.
    span : float, optional
        Extent of the onsets in the same unit, to count cycles; by default
        from the first to the last onset plus one cycle.

    Returns
    -------
    ndarray, shape (M,)
        Density at phases ``k / M``; a phase hit once per cycle by weight 1
        reaches about 1.

    Examples
    --------
    >>> f = wrapped_density([0, 1, 2, 3], [1, 1, 1, 1], length=1.0, n_bins=8, width=0.05)
    >>> int(np.argmax(f)), round(float(f.max()), 2)
    (0, 1.0)
    """
    x = np.asarray(positions, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    if span is None:
        span = (x.max() - x.min() + length) if len(x) else length
    n_cycles = max(span / length, 1.0)
    if len(x) == 0:
        return np.zeros(n_bins)
    return circular_bumps(x / length, w, n_bins, width) / n_cycles


def refined_phases(density, bins) -> np.ndarray:
    """Phase in [0, 1) of each given bin of a circle density, refined by a parabola through it and its neighbours.

    >>> round(float(refined_phases(np.array([0.0, 1.0, 1.0, 0.0]), np.array([1]))[0]), 3)
    0.375
    """
    f = np.asarray(density, dtype=np.float64)
    m = len(f)
    k = np.asarray(bins, dtype=np.int64)
    left, mid, right = f[(k - 1) % m], f[k], f[(k + 1) % m]
    denom = left - 2 * mid + right
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = np.where(denom < 0, 0.5 * (left - right) / denom, 0.0)
    return np.mod((k + np.clip(shift, -0.5, 0.5)) / m, 1.0)


@dataclass(frozen=True)
class WrappedCycle:
    """One cycle length of the scan, with its persistence summary.

    Attributes
    ----------
    length : float
        Cycle length in the scan's unit.
    density : ndarray, shape (M,)
        Wrapped density (see :func:`wrapped_density`).
    diagram : CircleDiagram
        Its superlevel-set persistence.
    """

    length: float
    density: np.ndarray
    diagram: CircleDiagram

    @property
    def n_bins(self) -> int:
        return len(self.density)

    @cached_property
    def peak_phases(self) -> np.ndarray:
        """Phase in [0, 1) of each peak, refined by a parabola through its bin."""
        return refined_phases(self.density, self.diagram.peaks)

    @cached_property
    def relative_persistence(self) -> np.ndarray:
        """Persistences divided by the essential one (which is then 1)."""
        pers = self.diagram.persistence
        return pers / pers[0] if len(pers) and pers[0] > 0 else np.zeros_like(pers)

    @property
    def dominance(self) -> float:
        """``(p1 - p2) / p1``: how far the top position stands above the next."""
        rel = self.relative_persistence
        if len(rel) == 0 or rel[0] == 0:
            return 0.0
        return float(1.0 - (rel[1] if len(rel) > 1 else 0.0))

    @property
    def contrast(self) -> float:
        """Essential persistence relative to the top: ``(top - floor) / top``."""
        top = float(self.diagram.births[0]) if len(self.diagram.births) else 0.0
        return (top - self.diagram.floor) / top if top > 0 else 0.0

    def persistence_at(self, phases, tolerance: float) -> np.ndarray:
        """Relative persistence of the peak nearest each phase, 0 if none within ``tolerance`` (cycle fraction)."""
        ph = np.atleast_1d(np.asarray(phases, dtype=np.float64))
        rel = self.relative_persistence
        if len(rel) == 0:
            return np.zeros(len(ph))
        d = np.abs(((self.peak_phases[None, :] - ph[:, None]) + 0.5) % 1.0 - 0.5)
        return np.where(d <= tolerance, rel[None, :], 0.0).max(axis=1)


def wrap_cycle(positions, weights, length: float, bins_per_unit: int = 12, width_units: float = 0.07,
               span: float | None = None, engine: str = "dionysus", max_bins: int = 240) -> WrappedCycle:
    """Wrap onsets at one cycle length and compute the persistence of the density.

    Parameters
    ----------
    positions, weights : array_like
        Onsets and weights.
    length : float
        Cycle length.
    bins_per_unit : int
        Bins per unit of position; the circle gets ``ceil(length * bins_per_unit)``
        bins, at least 12 and at most ``max_bins``; past the cap the bumps
        widen to about 2.5 bins.
    width_units : float
        Bump width in position units (converted to a cycle fraction).
    engine : {"dionysus", "unionfind"}
        Persistence engine (equal results; see :mod:`metertop.persistence`).

    Examples
    --------
    >>> c = wrap_cycle([0, 1, 2, 3, 4, 5], [2, 1, 1, 2, 1, 1], length=3.0)
    >>> round(float(c.peak_phases[0]), 3), c.dominance > 0.3
    (0.0, True)
    """
    n_bins, width = _bins_and_width(length, bins_per_unit, width_units, max_bins)
    dens = wrapped_density(positions, weights, length, n_bins, width, span=span)
    return WrappedCycle(float(length), dens, circle_diagram(dens, engine=engine))


def _bins_and_width(length: float, bins_per_unit: int, width_units: float, max_bins: int) -> tuple[int, float]:
    """Bins on the circle of a cycle of ``length``, and its bumps' width as a fraction of the cycle."""
    n_bins = int(min(max(np.ceil(length * bins_per_unit), 12), max_bins))
    # Where the bin cap bites (long cycles), widen the bumps to keep about
    # 2.5 bins per standard deviation; narrower bumps would fall between bins.
    return n_bins, max(width_units / length, 2.5 / n_bins if n_bins == max_bins else 0.0)


def wrap_cycles(positions, weights, lengths, bins_per_unit: int = 12, width_units: float = 0.07, spans=None,
                engine: str = "dionysus", max_bins: int = 240) -> list[WrappedCycle]:
    """:func:`wrap_cycle` at each of ``lengths`` (with its own ``span``), the same cycles, but the densities of
    the lengths that share a bin count are computed together, as rows of one transform.

    Examples
    --------
    >>> x, w = [0, 1, 2, 3, 4, 5], [2, 1, 1, 2, 1, 1]
    >>> a = wrap_cycles(x, w, [3.0, 6.0], spans=[8.0, 11.0])
    >>> all(np.array_equal(c.density, wrap_cycle(x, w, L, span=sp).density) for c, L, sp in zip(a, [3.0, 6.0], [8.0, 11.0]))
    True
    """
    x = np.asarray(positions, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    lengths = [float(L) for L in lengths]
    if spans is None:
        spans = [None] * len(lengths)
    if len(x) == 0:
        return [wrap_cycle(x, w, L, bins_per_unit, width_units, sp, engine, max_bins) for L, sp in zip(lengths, spans)]
    by_bins: dict = {}
    for i, length in enumerate(lengths):
        n_bins, width = _bins_and_width(length, bins_per_unit, width_units, max_bins)
        by_bins.setdefault(n_bins, []).append((i, width))
    out: list = [None] * len(lengths)
    for n_bins, rows in by_bins.items():
        # The same numbers as wrap_cycle and wrapped_density, one row per length.
        ls = np.array([lengths[i] for i, _ in rows])
        widths = np.array([width for _, width in rows])
        dens = _bumps(x[:, None] / ls[None, :], w, n_bins, widths)
        for r, (i, _) in enumerate(rows):
            row = _clear_ripples(dens[r])
            length, span = lengths[i], spans[i]
            if span is None:
                span = x.max() - x.min() + length
            row = row / max(span / length, 1.0)
            out[i] = WrappedCycle(float(length), row, circle_diagram(row, engine=engine))
    return out


def scan_lengths(positions, weights, lengths, **kwargs) -> list[WrappedCycle]:
    """:func:`wrap_cycle` at each of ``lengths``, with a common cycle count span."""
    x = np.asarray(positions, dtype=np.float64)
    span = float(x.max() - x.min()) if len(x) else 0.0
    return [wrap_cycle(x, weights, L, span=span + L, **kwargs) for L in lengths]
