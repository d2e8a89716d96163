"""Onset detection in a recording: band-wise spectral flux, an adaptive threshold, peak picking.

Conventions
-----------
- ``signal`` is a one-dimensional float array of samples (mono), at
  ``sample_rate`` samples a second; any scale (it is normalised to its peak,
  so the detector does not depend on the gain).
- Frames are ``frame_s`` long (the FFT size is the next power of two) and
  ``hop_s`` apart; frame ``n`` is centred on ``n * hop`` samples, so its time
  is ``n * hop / sample_rate`` seconds.
- Times are seconds, float64, sorted; strengths are positive float64.
- Bands: *low* below ``band_edges_hz[0]`` (kick-like onsets), *mid* up to
  ``band_edges_hz[1]`` (snare-like onsets, the body of most melodies), *high*
  above (hi-hats, cymbals, noise).

Method
------
1. STFT magnitude with a periodic Hann window, scaled so that a full-scale
   sine gives 1 at its bin.
2. A noise gate per bin: the bin's magnitude less ``noise_gate`` times its
   ``floor_percentile`` (10th) percentile over the recording, floored at 0
   (magnitude spectral subtraction, Boll 1979). Without it, the log
   compression below turns steady background noise into flux in every bin.
3. Log compression ``log(1 + gamma * |X|)`` (Klapuri 1999; Bello et al.
   2005, section III-A), then the half-wave rectified difference between
   consecutive frames, summed over the bins of each band: the spectral flux
   of each band (Bello et al. 2005, section III-B; Dixon 2006, eq. 4). The
   detection function is their sum, the spectral flux over all bins.
4. The detection function is normalised to mean 0 and standard deviation 1,
   and frame ``n`` is an onset when (Dixon 2006, section 2.6): it is the
   largest value within ``peak_window_s`` either side; it exceeds the mean of
   the frames from ``mean_before_s`` before to ``peak_window_s`` after it by
   ``delta``; and it is at least Dixon's trace of the earlier values,
   ``g(n) = max(f(n), alpha * g(n-1) + (1 - alpha) * f(n))``, which
   suppresses small peaks in the decay of a loud onset.
   Peaks closer than ``min_gap_s`` keep only the stronger.
5. An onset's time is refined by a parabola through the peak and its two
   neighbours. Its strength is the weighted sum of the three bands' flux at
   its frame (``band_weights``), so that kick-like (low) and snare-like
   (mid) onsets can weigh more, as kick and backbeat anchor the bar (common
   practice). The default weights 4, 2, 1 were chosen on development grooves
   (``bench/audio_bench.py --split train``) among 1:1:1, 4:2:1 and 10:3:1.
   Dividing each band's flux by its number of bins first (a kick's flux
   sits in a few low bins) found more downbeats but fewer metres there
   (docs/audio.md), so the flux is summed over the bins as it is.
6. The kit reading (:func:`is_kit`, :func:`kit_strokes`): a recording whose
   onsets often carry most of their flux in the high band is read as a drum
   kit, and each onset as the drums its band levels show (kick, snare,
   hi-hat, crash; General MIDI keys), each band read at its largest within
   ``band_window_s`` of the onset and against its own percentile over the
   recording (docs/audio.md, "The kit reading").

References
----------
- Bello, J. P., Daudet, L., Abdallah, S., Duxbury, C., Davies, M. & Sandler,
  M. B. (2005). A tutorial on onset detection in music signals. *IEEE Trans.
  Speech and Audio Processing* 13(5), 1035-1047. doi:10.1109/TSA.2005.851998
- Dixon, S. (2006). Onset detection revisited. *Proc. DAFx-06*, Montreal,
  133-137.
- Boll, S. F. (1979). Suppression of acoustic noise in speech using
  spectral subtraction. *IEEE Trans. ASSP* 27(2), 113-120.
- Klapuri, A. (1999). Sound onset detection by applying psychoacoustic
  knowledge. *Proc. IEEE ICASSP*, 3089-3092.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError

__all__ = ["FluxSettings", "OnsetStrength", "Onsets", "stft_magnitude", "onset_strength", "pick_peaks", "detect_onsets", "BANDS",
           "KIT_KEYS", "high_share", "is_kit", "kit_strokes"]

BANDS = ("low", "mid", "high")
# Frames per FFT batch: about 16 MB of float32 at 44.1 kHz, whatever the length.
_CHUNK_FRAMES = 2048


@dataclass(frozen=True)
class FluxSettings:
    """Parameters of the onset detector (see the module notes for their roles).

    ``band_weights`` (low, mid, high) scale each band's flux in an onset's
    strength only; the onsets found do not depend on them. ``silence_dbfs``
    is the peak level below which a recording counts as silent.
    """

    frame_s: float = 0.046
    hop_s: float = 0.010
    compression: float = 100.0
    band_edges_hz: tuple[float, float] = (150.0, 4000.0)
    band_weights: tuple[float, float, float] = (4.0, 2.0, 1.0)
    peak_window_s: float = 0.03
    mean_before_s: float = 0.1
    delta: float = 0.4
    alpha: float = 0.8
    min_gap_s: float = 0.03
    silence_dbfs: float = -60.0
    noise_gate: float = 5.0
    floor_percentile: float = 10.0
    kit: bool | None = None
    kit_share: float = 0.1
    kit_levels: tuple[float, float, float, float, float, float] = (0.15, 0.7, 0.5, 0.3, 1.2, 2.0)
    kit_percentile: float = 90.0
    band_window_s: float = 0.02

    def __post_init__(self) -> None:
        if not (0.001 <= self.hop_s <= self.frame_s <= 1.0):
            raise ValueError(f"need 0.001 <= hop_s <= frame_s <= 1 s, got hop_s={self.hop_s}, frame_s={self.frame_s}")
        lo, hi = self.band_edges_hz
        if not 0 < lo < hi:
            raise ValueError(f"band edges must be increasing and positive, got {self.band_edges_hz}")
        if len(self.band_weights) != 3 or any(not np.isfinite(w) or w < 0 for w in self.band_weights) or sum(self.band_weights) <= 0:
            raise ValueError(f"band_weights needs three non-negative numbers (low, mid, high), not all 0; got {self.band_weights}")
        if self.compression <= 0 or not 0 <= self.alpha < 1:
            raise ValueError("compression must be positive and alpha in [0, 1)")
        if len(self.kit_levels) != 6 or any(not np.isfinite(v) or v < 0 for v in self.kit_levels):
            raise ValueError(f"kit_levels needs six non-negative numbers, got {self.kit_levels}")

    def frame_samples(self, sample_rate: float) -> tuple[int, int]:
        """FFT size (a power of two of at least ``frame_s``) and hop, in samples."""
        n_fft = 1 << max(int(np.ceil(np.log2(max(self.frame_s * sample_rate, 16)))), 4)
        return n_fft, max(int(round(self.hop_s * sample_rate)), 1)


@dataclass(frozen=True)
class OnsetStrength:
    """The flux of every frame.

    Attributes
    ----------
    times_s : ndarray
        Frame times (frame centres), seconds.
    bands : ndarray, shape (n_frames, 3)
        Each band's half-wave rectified log-magnitude flux (low, mid, high).
    frame_rate : float
        Frames per second.
    """

    times_s: np.ndarray
    bands: np.ndarray
    frame_rate: float

    @property
    def detection(self) -> np.ndarray:
        """The detection function: the spectral flux over all bins (the sum of the bands')."""
        return self.bands.sum(axis=1)


@dataclass(frozen=True)
class Onsets:
    """Detected onsets: ``times_s`` (sorted), ``strengths`` (the weighted band flux at the onset's frame), ``bands`` (n, 3).

    ``bands`` holds each band's largest flux within ``band_window_s`` of the
    onset's frame (low, mid, high), for the kit reading.
    """

    times_s: np.ndarray
    strengths: np.ndarray
    bands: np.ndarray

    def __len__(self) -> int:
        return len(self.times_s)


def _band_slices(n_fft: int, sample_rate: float, edges_hz) -> list[slice]:
    """Bins of each band; bin 0 (DC) is left out, and a band narrower than one bin gets one."""
    n_bins = n_fft // 2 + 1
    lo, hi = (int(np.ceil(e * n_fft / sample_rate)) for e in edges_hz)
    # At a very low sample rate both edges lie above the Nyquist frequency: the mid and high bands get the top two bins.
    lo = int(np.clip(lo, 2, n_bins - 2))
    cut = [lo, int(np.clip(hi, lo + 1, n_bins - 1))]
    return [slice(1, cut[0]), slice(cut[0], cut[1]), slice(cut[1], n_bins)]


def onset_strength(signal, sample_rate: float, settings: FluxSettings = FluxSettings()) -> OnsetStrength:
    """Band-wise spectral flux of a mono signal, frame by frame.

    The signal is scaled to a peak of 1 first (a silent signal stays 0). The
    STFT runs in batches of frames, so memory stays bounded for long files.

    Examples
    --------
    >>> sr = 8000
    >>> x = np.zeros(sr)
    >>> x[4000] = 1.0                    # one click at 0.5 s
    >>> s = onset_strength(x, sr)
    >>> float(s.times_s[np.argmax(s.detection)])  # the rise comes just before the click
    0.49
    """
    import scipy.fft

    x = np.asarray(signal, dtype=np.float32).ravel()
    if not np.isfinite(sample_rate) or sample_rate <= 0:
        raise ValueError(f"sample rate must be positive, got {sample_rate}")
    peak = float(np.max(np.abs(x))) if len(x) else 0.0
    if peak > 0:
        x = x / np.float32(peak)
    n_fft, hop = settings.frame_samples(sample_rate)
    frames_view, window = _frames(x, sample_rate, settings)
    n_frames = frames_view.shape[0]
    # Magnitudes scaled by 2 / sum(window): a full-scale sine on a bin has magnitude 1 there.
    scale = np.float32(2.0 / window.sum())
    gamma = np.float32(settings.compression)
    slices = _band_slices(n_fft, sample_rate, settings.band_edges_hz)
    starts = [s.start for s in slices]
    bands = np.zeros((n_frames, 3), dtype=np.float64)
    floor = _noise_floor(x, sample_rate, settings) if settings.noise_gate > 0 else None
    prev = None
    for a in range(0, n_frames, _CHUNK_FRAMES):
        b = min(a + _CHUNK_FRAMES, n_frames)
        mag = np.abs(scipy.fft.rfft(frames_view[a:b] * window, axis=1)) * scale
        if floor is not None:
            mag = np.maximum(mag - floor, 0.0)
        logmag = np.log1p(gamma * mag)
        stacked = logmag if prev is None else np.concatenate([prev[None, :], logmag])
        rise = np.maximum(np.diff(stacked, axis=0), 0.0)
        sums = np.add.reduceat(rise[:, 1:], np.array(starts) - 1, axis=1)
        first = a + 1 if prev is None else a
        bands[first:b] = sums
        prev = logmag[-1]
    times = np.arange(n_frames) * (hop / float(sample_rate))
    return OnsetStrength(times_s=times, bands=bands, frame_rate=sample_rate / hop)


def _frames(x: np.ndarray, sample_rate: float, settings: FluxSettings):
    """Every frame of ``x`` as a strided view (frame n centred on sample n * hop), and the periodic Hann window."""
    n_fft, hop = settings.frame_samples(sample_rate)
    half = n_fft // 2
    padded = np.concatenate([np.zeros(half, np.float32), x, np.zeros(half + hop, np.float32)])
    n_frames = len(x) // hop + 1
    window = (0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n_fft) / n_fft)).astype(np.float32)
    return np.lib.stride_tricks.sliding_window_view(padded, n_fft)[::hop][:n_frames], window


def stft_magnitude(signal, sample_rate: float, settings: FluxSettings = FluxSettings(), frames=None) -> np.ndarray:
    """STFT magnitude of the chosen frames (all by default), shape (n_frames, n_fft // 2 + 1), without peak normalisation.

    Scaled by ``2 / sum(window)``, so that a sine of amplitude A centred on
    a bin has magnitude A there (the Hann window's coherent gain is 1/2).

    Examples
    --------
    >>> sr = 8000
    >>> n_fft, _ = FluxSettings().frame_samples(sr)
    >>> t = np.arange(sr) / sr
    >>> mag = stft_magnitude(0.5 * np.sin(2 * np.pi * (10 * sr / n_fft) * t), sr, frames=[50])
    >>> round(float(mag[0, 10]), 4)
    0.5
    """
    import scipy.fft

    x = np.asarray(signal, dtype=np.float32).ravel()
    view, window = _frames(x, sample_rate, settings)
    pick = np.arange(view.shape[0]) if frames is None else np.asarray(frames, dtype=np.int64)
    return np.abs(scipy.fft.rfft(view[pick] * window, axis=1)) * np.float32(2.0 / window.sum())


def _noise_floor(x: np.ndarray, sample_rate: float, settings: FluxSettings) -> np.ndarray:
    """Per-bin gate: ``noise_gate`` times the bin's ``floor_percentile`` magnitude over (at most 1000 evenly spaced) frames."""
    n = len(x) // settings.frame_samples(sample_rate)[1] + 1
    pick = np.unique(np.linspace(0, n - 1, min(n, 1000)).astype(np.int64))
    mag = stft_magnitude(x, sample_rate, settings, frames=pick)
    return (settings.noise_gate * np.percentile(mag, settings.floor_percentile, axis=0)).astype(np.float32)


def _previous_trace(f: np.ndarray, alpha: float) -> np.ndarray:
    """Dixon's (2006) trace ``g(n) = max(f(n), alpha * g(n-1) + (1 - alpha) * f(n))``, shifted: entry n is g(n-1).

    Entry 0 is ``-inf`` (nothing came before).
    """
    out = np.empty(len(f))
    g = -np.inf
    for i, v in enumerate(f.tolist()):
        out[i] = g
        g = v if g == -np.inf else max(v, alpha * g + (1.0 - alpha) * v)
    return out


def pick_peaks(strength: OnsetStrength, settings: FluxSettings = FluxSettings()) -> np.ndarray:
    """Frame indices of the onsets in a detection function (the rules of Dixon 2006, section 2.6).

    Examples
    --------
    >>> f = np.zeros(200)
    >>> f[[20, 70, 120]] = [1.0, 0.6, 1.0]
    >>> s = OnsetStrength(np.arange(200) / 100.0, np.repeat(f[:, None], 3, axis=1), 100.0)
    >>> pick_peaks(s).tolist()
    [20, 70, 120]
    """
    from scipy.ndimage import maximum_filter1d, uniform_filter1d

    f = strength.detection
    n = len(f)
    if n < 3:
        return np.zeros(0, dtype=np.int64)
    sd = f.std()
    if not sd > 0:
        return np.zeros(0, dtype=np.int64)
    z = (f - f.mean()) / sd
    w = max(int(round(settings.peak_window_s * strength.frame_rate)), 1)
    m = max(int(round(settings.mean_before_s * strength.frame_rate)), w)
    local_max = z >= maximum_filter1d(z, size=2 * w + 1, mode="nearest")
    # Mean over [n - m, n + w]: a centred uniform filter of length m + w + 1, moved.
    size = m + w + 1
    origin = (m - w) // 2
    local_mean = uniform_filter1d(z, size=size, mode="nearest", origin=origin)
    above_mean = z >= local_mean + settings.delta
    above_trace = z >= _previous_trace(z, settings.alpha)
    # A flat top (equal neighbours) would give several frames: keep its first.
    rising = np.ones(n, dtype=bool)
    rising[1:] = z[1:] > z[:-1]
    cand = np.flatnonzero(local_max & above_mean & above_trace & rising & (f > 0))
    return _enforce_gap(cand, z, max(int(round(settings.min_gap_s * strength.frame_rate)), 1))


def _enforce_gap(cand: np.ndarray, z: np.ndarray, gap: int) -> np.ndarray:
    """Of peaks closer than ``gap`` frames, keep the stronger (greedy by strength)."""
    if len(cand) < 2 or np.all(np.diff(cand) >= gap):
        return cand
    order = cand[np.argsort(-z[cand], kind="stable")]
    taken = np.zeros(len(z), dtype=bool)
    keep = []
    for i in order.tolist():
        lo, hi = max(i - gap + 1, 0), i + gap
        if not taken[lo:hi].any():
            keep.append(i)
            taken[i] = True
    return np.sort(np.array(keep, dtype=np.int64))


def _refine(f: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Sub-frame offset of each peak from the parabola through it and its neighbours, in frames (within +-0.5)."""
    left = f[np.maximum(idx - 1, 0)]
    mid = f[idx]
    right = f[np.minimum(idx + 1, len(f) - 1)]
    den = left - 2 * mid + right
    with np.errstate(divide="ignore", invalid="ignore"):
        off = np.where(den < 0, 0.5 * (left - right) / den, 0.0)
    return np.clip(off, -0.5, 0.5)


def detect_onsets(signal, sample_rate: float, settings: FluxSettings = FluxSettings()) -> Onsets:
    """Onset times and strengths of a mono recording.

    Raises
    ------
    InputError
        When the recording is silent (its peak is below
        ``settings.silence_dbfs``) or no onset stands out.

    Examples
    --------
    >>> sr = 8000
    >>> x = np.zeros(2 * sr)
    >>> for t in (0.25, 0.75, 1.25):     # three clicks
    ...     x[int(t * sr)] = 1.0
    >>> on = detect_onsets(x, sr)
    >>> np.round(on.times_s, 2).tolist()
    [0.24, 0.74, 1.24]
    """
    x = np.asarray(signal).ravel()
    peak = float(np.max(np.abs(x))) if len(x) else 0.0
    if not np.isfinite(peak):
        raise InputError("the recording holds samples that are not finite numbers")
    level = 20 * np.log10(peak) if peak > 0 else -np.inf
    if level < settings.silence_dbfs:
        raise InputError(f"no onsets found: the recording is silent (peak level {level:.0f} dBFS, "
                         f"below {settings.silence_dbfs:g} dBFS)")
    strength = onset_strength(x, sample_rate, settings)
    idx = pick_peaks(strength, settings)
    if len(idx) == 0:
        raise InputError("no onsets found: the recording holds no sound that starts clearly")
    f = strength.detection
    times = (idx + _refine(f, idx)) / strength.frame_rate
    weights = np.asarray(settings.band_weights, dtype=np.float64)
    strengths = strength.bands[idx] @ weights / weights.mean()
    times = np.clip(times, 0.0, None)
    return Onsets(times_s=times, strengths=strengths, bands=_band_peaks(strength, idx, settings.band_window_s))


def _band_peaks(strength: OnsetStrength, idx: np.ndarray, window_s: float) -> np.ndarray:
    """Each band's largest flux within ``window_s`` of each onset's frame, shape (len(idx), 3).

    Drums struck together rarely rise in the same 10 ms frame (a hi-hat a
    little ahead of the kick), and the peak frame holds only the first.
    """
    from scipy.ndimage import maximum_filter1d

    w = int(round(window_s * strength.frame_rate))
    if w < 1 or not len(idx):
        return strength.bands[idx]
    return maximum_filter1d(strength.bands, size=2 * w + 1, axis=0, mode="nearest")[idx]


# General MIDI percussion keys (an open standard) that the kit reading gives
# an onset: kick, snare, closed hi-hat, crash cymbal, and the high wood block
# for an onset that fits none of them.
KIT_KEYS = {"kick": 36, "snare": 38, "hat": 42, "crash": 49, "other": 76}


def high_share(bands) -> float:
    """Share of the onsets whose high band carries at least half their flux (cymbals, hi-hats, snare noise).

    >>> high_share([[1.0, 0.5, 0.1], [0.0, 0.1, 2.0]])
    0.5
    """
    b = np.asarray(bands, dtype=np.float64).reshape(-1, 3)
    total = b.sum(axis=1)
    if not len(b):
        return 0.0
    return float(np.mean(b[:, 2] >= 0.5 * np.maximum(total, 1e-12)))  # an onset without flux is not high-dominated


def is_kit(bands, settings: FluxSettings = FluxSettings()) -> bool:
    """Whether a recording's onsets read as a drum kit: ``settings.kit`` if set, else :func:`high_share` at least ``kit_share``."""
    if settings.kit is not None:
        return bool(settings.kit)
    return high_share(bands) >= settings.kit_share


def kit_strokes(bands, settings: FluxSettings = FluxSettings()) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The drums each onset sounds, from its band flux: onset index, General MIDI key and level of each stroke, sorted by onset.

    Each band's flux is divided by its ``kit_percentile`` over the
    recording's onsets, so the rules read levels relative to the
    recording. With ``low, low_mid, mid, snare_high, crash, crash_mid = settings.kit_levels``:

    - a kick (36) where the low band reaches ``low`` and ``low_mid`` times
      the mid band (a snare's body leaks a little into the low band);
    - a snare (38) where the mid band reaches ``mid`` and the high band
      ``snare_high`` (a snare's noise spans both);
    - a crash (49) where the high band reaches ``crash`` and ``crash_mid``
      times the mid band (a loud snare under a hi-hat reaches the level
      too, but its noise fills the mid band);
    - a hi-hat (42) where the high band reaches ``snare_high`` without a
      snare or a crash;
    - an onset with none of these gets its strongest band's drum (kick,
      wood block, hi-hat).

    A stroke's level is its drum's band (low for the kick, mid for the
    snare, high for cymbals) relative to that band's percentile: how loud
    the drum is against its own other hits, as a drum's MIDI velocity is.
    An onset's total flux would make every snare louder than the kick, its
    noise spanning more bins.

    Kick energy sits below the low edge, cymbals and hi-hats above the high
    one (common practice); the levels were chosen on development grooves
    (docs/audio.md).

    Examples
    --------
    >>> idx, keys, levels = kit_strokes([[5.0, 0.2, 0.1], [0.1, 4.0, 3.0], [0.0, 0.0, 2.0], [4.0, 0.1, 2.0]])
    >>> list(zip(idx.tolist(), keys.tolist()))
    [(0, 36), (1, 38), (2, 42), (3, 36), (3, 42)]
    >>> np.round(levels, 2).tolist()   # against the 90th percentiles: low 4.7, mid 2.86, high 2.7
    [1.06, 1.4, 0.74, 0.85, 0.74]
    """
    b = np.asarray(bands, dtype=np.float64).reshape(-1, 3)
    if not len(b):
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    scale = np.percentile(b, settings.kit_percentile, axis=0)
    r = b / np.where(scale > 0, scale, np.inf)
    low, low_mid, mid, snare_high, crash, crash_mid = settings.kit_levels
    kick = (r[:, 0] >= low) & (r[:, 0] >= low_mid * r[:, 1])
    snare = (r[:, 1] >= mid) & (r[:, 2] >= snare_high)
    cymbal = (r[:, 2] >= crash) & (r[:, 2] >= crash_mid * r[:, 1])
    hat = (r[:, 2] >= snare_high) & ~snare & ~cymbal
    hits = np.column_stack([kick, snare, hat, cymbal])
    keys = np.array([KIT_KEYS["kick"], KIT_KEYS["snare"], KIT_KEYS["hat"], KIT_KEYS["crash"]])
    none = ~hits.any(axis=1)
    fallback = np.array([KIT_KEYS["kick"], KIT_KEYS["other"], KIT_KEYS["hat"]])[np.argmax(r, axis=1)]
    rows, cols = np.nonzero(hits)
    idx = np.concatenate([rows, np.flatnonzero(none)])
    key = np.concatenate([keys[cols], fallback[none]])
    band = np.concatenate([np.array([0, 1, 2, 2])[cols], np.argmax(r, axis=1)[none]])
    order = np.lexsort((key, idx))
    return idx[order].astype(np.int64), key[order].astype(np.int64), r[idx, band][order]
