"""One-dimensional smoothing filters over sampled traces (moving mean, moving median,
Gaussian), with the two edge rules the track and log readers need:

* ``"wrap"``: the trace is periodic (a closed lap);
* ``"nearest"``: the end samples are repeated outwards (an open run).

They follow the definitions of the general-purpose image filters (the window of a moving
mean of even size ``n`` covers ``n // 2`` samples before and ``n - 1 - n // 2`` after; the
Gaussian kernel is cut at ``truncate`` standard deviations, radius ``int(truncate σ + 0.5)``
samples, and normalised to unit sum) and are written here because importing
``scipy.ndimage`` costs about 0.4 s, a third of a warm ``lapbalance lap`` run. Sizes and σ are
in samples; the values keep their unit.
"""

from __future__ import annotations

import numpy as np

MODES = ("wrap", "nearest")


def _pad(a: np.ndarray, before: int, after: int, mode: str, axis: int) -> np.ndarray:
    if mode not in MODES:
        raise ValueError(f"mode must be one of {MODES}, not {mode!r}")
    if before == 0 and after == 0:
        return a
    width = [(0, 0)] * a.ndim
    width[axis] = (before, after)
    return np.pad(a, width, mode="wrap" if mode == "wrap" else "edge")


def uniform_filter1d(a, size: int, axis: int = -1, mode: str = "nearest") -> np.ndarray:
    """Moving mean over ``size`` samples along ``axis`` [unit of ``a``]."""
    a = np.asarray(a, float)
    size = int(size)
    if size < 1:
        raise ValueError("size must be at least 1")
    axis = axis % a.ndim
    left = size // 2
    right = size - 1 - left
    ext = _pad(a, left, right, mode, axis)
    c = np.cumsum(ext, axis=axis)
    zero = np.zeros_like(np.take(c, [0], axis=axis))
    c = np.concatenate([zero, c], axis=axis)
    n = a.shape[axis]
    hi = np.take(c, np.arange(size, size + n), axis=axis)
    lo = np.take(c, np.arange(0, n), axis=axis)
    return (hi - lo) / size


def gaussian_filter1d(a, sigma: float, mode: str = "nearest", truncate: float = 4.0
                      ) -> np.ndarray:
    """Gaussian low-pass of a 1-D trace, standard deviation ``sigma`` [samples]."""
    a = np.asarray(a, float)
    sigma = float(sigma)
    radius = int(truncate * sigma + 0.5)
    if radius < 1 or sigma <= 0.0:
        return a.copy()
    x = np.arange(-radius, radius + 1, dtype=float)
    w = np.exp(-0.5 * (x / sigma) ** 2)
    w /= w.sum()
    ext = _pad(a, radius, radius, mode, 0)
    return np.convolve(ext, w, mode="valid")


def median_filter(a, size: int, mode: str = "nearest") -> np.ndarray:
    """Moving median of a 1-D trace over an odd window of ``size`` samples."""
    a = np.asarray(a, float)
    size = int(size)
    if size < 1 or size % 2 == 0:
        raise ValueError("size must be an odd number of samples")
    half = size // 2
    ext = _pad(a, half, half, mode, 0)
    return np.median(np.lib.stride_tricks.sliding_window_view(ext, size), axis=-1)


def next_fast_len(n: int) -> int:
    """Smallest length >= ``n`` whose prime factors are all 2, 3, 5, 7 or 11 (FFT lengths
    of that kind are fast)."""
    n = int(n)
    if n <= 1:
        return 1
    m = n
    while True:
        r = m
        for f in (2, 3, 5, 7, 11):
            while r % f == 0:
                r //= f
        if r == 1:
            return m
        m += 1
