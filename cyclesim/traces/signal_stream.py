"""The cycles of one recording as one joined stream: grid checks, block-wise reads and writes, a uniform cubic spline for resampling, and the passage filter."""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError


# --------------------------------------------------------------------------- grid helpers
def _grid(theta) -> tuple[float, bool]:
    """Step [deg] of a uniform one-cycle grid and whether it has both -360 and 360 ends."""
    th = np.asarray(theta, dtype=float)
    if th.ndim != 1 or th.size < 8:
        raise CyclesimError("crank grid: need a 1-D array of at least 8 angles [deg]")
    d = np.diff(th)
    step = float(np.mean(d))
    if step <= 0 or np.max(np.abs(d - step)) > 1e-6 * max(step, 1e-12) + 1e-9:
        raise CyclesimError("crank grid: angles must be uniformly spaced and increasing")
    span = th[-1] - th[0]
    if abs(span - 720.0) < 1e-6 * 720:
        return step, True
    if abs(span + step - 720.0) < 1e-6 * 720:
        return step, False
    raise CyclesimError(f"crank grid: must cover one 720 deg cycle (it covers {span:g} deg)")


def _to_stream(P: np.ndarray, closed: bool) -> np.ndarray:
    """Join cycles end to end; with both ends present a row's last sample is the next row's first."""
    if not closed:
        return P.reshape(-1).copy()
    nc, n = P.shape
    m = n - 1
    s = np.empty(nc * m + 1)
    s[:-1].reshape(nc, m)[...] = P[:, :-1]
    s[-1] = P[-1, -1]
    return s


def _from_stream(s: np.ndarray, shape: tuple, closed: bool) -> np.ndarray:
    n_cycles, n = shape
    if not closed:
        return s.reshape(n_cycles, n).copy()
    m = n - 1
    out = np.empty(shape)
    out[:, :m] = s[:n_cycles * m].reshape(n_cycles, m)
    out[:, m] = s[m::m][:n_cycles]
    return out


def _stream_angle(theta, n_cycles, closed) -> np.ndarray:
    """Continuous crank angle of the joined stream [deg]."""
    th = np.asarray(theta, float)
    return _to_stream(th[None, :] + 720.0 * np.arange(n_cycles)[:, None], closed)


def _as_2d(x, shape, name) -> np.ndarray:
    """``x`` as a read-only (n_cycles, n) float array (a broadcast view where possible)."""
    a = np.asarray(x, dtype=float)
    if a.ndim == 1 and a.shape[0] == shape[0] and shape[0] != shape[1]:
        a = a[:, None]
    try:
        return np.broadcast_to(a, shape)
    except ValueError:
        raise CyclesimError(f"{name}: shape {a.shape} does not fit the pressure array {shape}") from None


# --------------------------------------------------------------------------- the joined stream in blocks
# The time-domain steps run over the cycles joined end to end (the stream).  They are
# evaluated in blocks of whole cycles, reading from and writing to the (n_cycles, n)
# arrays directly, so no step needs a full-length copy of the record in between; the
# recursive filters carry their state from block to block (the same arithmetic as one
# pass over the whole stream).  For a grid with both ends, stream sample k m (m samples
# per cycle) is row k's first sample and row k-1's last.

#: Stream samples per block (rounded to whole cycles): the working arrays stay in cache.
_BLOCK_SAMPLES = 1 << 16


def _stream_length(shape, m) -> int:
    return shape[0] * m + (shape[1] - m)


def _cycle_blocks(nc: int, m: int, closed: bool, per_block: int):
    """Blocks ``(k0, k1, a, b)``: cycles k0..k1-1, holding stream samples a..b-1 of period ``m``."""
    g = max(1, per_block)
    for k0 in range(0, nc, g):
        k1 = min(nc, k0 + g)
        yield k0, k1, k0 * m, k1 * m + (1 if closed and k1 == nc else 0)


def _stream_read(X: np.ndarray, m: int, a: int, b: int) -> np.ndarray:
    """Samples a..b-1 (0 <= a <= b <= length) of the stream of rows ``X`` with period ``m``."""
    nc, n = X.shape
    out = np.empty(b - a)
    j = a
    while j < b:
        r = min(j // m, nc - 1)
        c = j - r * m
        take = min(b - j, (n if r == nc - 1 else m) - c)
        out[j - a:j - a + take] = X[r, c:c + take]
        j += take
    return out


def _stream_window(X: np.ndarray, m: int, a: int, b: int) -> np.ndarray:
    """Stream samples a..b-1, continued beyond its ends by odd reflection about the end samples.

    The continuation is the one of ``scipy.signal.filtfilt(padtype="odd")``:
    s[-j] -> 2 s[0] - s[j] and s[L-1+j] -> 2 s[L-1] - s[L-1-j] (L = stream length, j <= L-1).
    """
    S = _stream_length(X.shape, m)
    out = np.empty(b - a)
    lo, hi = max(a, 0), min(b, S)
    out[lo - a:hi - a] = _stream_read(X, m, lo, hi)
    if a < 0:
        out[:-a] = 2.0 * X[0, 0] - _stream_read(X, m, 1, 1 - a)[::-1]
    if b > S:
        out[S - a:] = 2.0 * X[-1, -1] - _stream_read(X, m, 2 * S - 1 - b, S - 1)[::-1]
    return out


def _stream_write(Y: np.ndarray, m: int, a: int, v: np.ndarray) -> None:
    """Write stream samples a..a+len(v)-1 into rows ``Y`` with period ``m`` (both copies of a shared sample)."""
    nc, n = Y.shape
    b = a + v.size
    j = a
    while j < b:
        r = min(j // m, nc - 1)
        c = j - r * m
        take = min(b - j, (n if r == nc - 1 else m) - c)
        Y[r, c:c + take] = v[j - a:j - a + take]
        j += take
    if n > m:
        # sample k m is also the last one of row k-1 (k = 1..nc-1)
        k0, k1 = max(1, -(-a // m)), min(nc - 1, (b - 1) // m)
        if k1 >= k0:
            Y[k0 - 1:k1, m] = v[k0 * m - a:k1 * m - a + 1:m]


class _RowStats:
    """Per-cycle minimum, mean and first value of a stream quantity computed block by block.

    A cycle's row holds stream samples k m .. k m + n - 1: with both grid ends that
    includes the first sample of the next cycle, which arrives with the next block.
    """

    def __init__(self, nc: int, m: int, n: int):
        self.m, self.n = m, n
        self.lo = np.zeros(nc)
        self.sum = np.zeros(nc)
        self.first = np.zeros(nc + 1)

    def add(self, k0: int, k1: int, v: np.ndarray, squares: bool = False) -> None:
        m = self.m
        rows = v[:(k1 - k0) * m].reshape(k1 - k0, m)
        self.first[k0:k1] = rows[:, 0]
        if v.size > (k1 - k0) * m:
            self.first[k1] = v[-1]
        if squares:
            self.sum[k0:k1] = np.sum(rows * rows, axis=1)
        else:
            self.lo[k0:k1] = rows.min(axis=1)
            self.sum[k0:k1] = rows.sum(axis=1)

    def minimum(self) -> np.ndarray:
        return np.minimum(self.lo, self.first[1:]) if self.n > self.m else self.lo

    def mean(self, squares: bool = False) -> np.ndarray:
        if self.n == self.m:
            return self.sum / self.n
        last = self.first[1:] * self.first[1:] if squares else self.first[1:]
        return (self.sum + last) / self.n


# --------------------------------------------------------------------------- cubic spline on a uniform grid
#: Pole of the cubic-spline recursion, z^-1 + 4 + z = -(1 - p z^-1)(1 - p z) / p.
_SPLINE_POLE = np.sqrt(3.0) - 2.0
#: Samples within which an end condition is felt: |p|^48 = 3e-28 (far below rounding).
_SPLINE_REACH = 48


def _spline_slopes(y: np.ndarray) -> np.ndarray:
    """Slopes [per sample] of the interpolating cubic spline through ``y`` on a uniform grid.

    A C2 cubic spline through y_i at unit spacing has slopes s_i with
    s_{i-1} + 4 s_i + s_{i+1} = 3 (y_{i+1} - y_{i-1}) at every inner sample.  The
    tridiagonal operator factorises into a causal and an anticausal first-order
    recursion with the pole p = sqrt(3) - 2 (the cubic B-spline prefilter, Unser,
    Aldroubi & Eden 1991), so the slopes follow from two passes of a first-order
    recursive filter.  The result satisfies the inner equations exactly; the end
    conditions are not imposed, so slopes within ``_SPLINE_REACH`` samples of either
    end are only valid where the caller replaces them (their error decays as |p|^k).
    """
    from scipy import signal

    p = _SPLINE_POLE
    r = np.empty(y.size)
    np.subtract(y[2:], y[:-2], out=r[1:-1])
    r[1:-1] *= 3.0
    r[0], r[-1] = r[1], r[-2]
    c = signal.lfilter([1.0], [1.0, -p], r)
    return signal.lfilter([-p], [1.0, -p], c[::-1])[::-1]


def _end_slopes(y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Slopes [per sample] of the not-a-knot spline through ``y`` at its first and last ``_SPLINE_REACH`` samples.

    Each from ``scipy.interpolate.CubicSpline`` over the first (last) 2 ``_SPLINE_REACH``
    samples: the other end of that short spline changes them by less than |p|^48.
    """
    from scipy.interpolate import CubicSpline

    k = _SPLINE_REACH
    x = np.arange(2.0 * k)
    return CubicSpline(x, y[:2 * k])(x[:k], 1), CubicSpline(x, y[-2 * k:])(x[k:], 1)


def _spline_at(y: np.ndarray, s: np.ndarray, i: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Cubic on interval i (samples i, i+1; slopes per sample s) at local coordinate t."""
    y0 = y[i]
    s0 = s[i]
    s1 = s[i + 1]
    dy = y[i + 1] - y0
    c2 = 3.0 * dy - 2.0 * s0 - s1
    c3 = s0 + s1 - 2.0 * dy
    return y0 + t * (s0 + t * (c2 + t * c3))


def _resample_stream(src: np.ndarray, shift_at, dst: np.ndarray, m: int, closed: bool) -> None:
    """Not-a-knot cubic spline through the stream ``src`` (uniform, unit spacing) at sample j + shift_j.

    Equals ``CubicSpline(arange(L), src)(arange(L) + shift)`` to rounding (beyond the ends it
    extrapolates the end intervals as that does), evaluated in blocks of whole cycles.
    ``shift_at(k0, k1, a, b)`` returns the shifts [samples] of stream samples a..b-1 (cycles
    k0..k1-1; called once per block, in order); the result is written into the rows ``dst``.
    """
    S = src.size
    K = _SPLINE_REACH
    head, tail = _end_slopes(src)
    nc = dst.shape[0]
    for k0, k1, a, b in _cycle_blocks(nc, m, closed, _BLOCK_SAMPLES // m):
        d = shift_at(k0, k1, a, b)
        fl = np.floor(d)
        lo_k, hi_k = int(fl.min()), int(fl.max())
        w0 = max(0, a + lo_k - K)
        w1 = min(S, b + hi_k + 2 + K)
        y = src[w0:w1]
        s = _spline_slopes(y)
        if w0 == 0:
            s[:K] = head
        if w1 == S:
            s[-K:] = tail
        j = np.arange(a, b)
        i = j + fl.astype(np.intp)
        np.clip(i, 0, S - 2, out=i)
        t = d - (i - j)
        _stream_write(dst, m, a, _spline_at(y, s, i - w0, t))


# --------------------------------------------------------------------------- filters
def _passage_sos(fs, fn, zeta):
    """H(s) = wn^2 / (s^2 + 2 zeta wn s + wn^2), bilinear transform pre-warped at fn (second-order sections)."""
    from scipy import signal

    if fn >= 0.5 * fs:
        raise CyclesimError(
            f"passage resonance {fn:g} Hz is above half the sample rate {fs:g} Hz: use a finer crank grid"
        )
    wn = 2 * np.pi * fn
    # pre-warp wn so that the digital filter's natural frequency is exactly fn
    wn_w = 2 * fs * np.tan(wn / (2 * fs))
    z, p, k = signal.bilinear_zpk([], np.roots([1, 2 * zeta * wn_w, wn_w * wn_w]), wn_w * wn_w, fs)
    return signal.zpk2sos(z, p, k)
