"""Zero-phase anti-alias decimation of a fine synthetic trace to the measuring grid (an angle step or a sample rate)."""

from __future__ import annotations

import numpy as np

from ..errors import CyclesimError
from . import signal_stream
from .signal_stream import (_cycle_blocks, _from_stream, _grid, _stream_length, _stream_window, _stream_write,
                            _to_stream)


# --------------------------------------------------------------------------- decimation
def _antialias_fir(qi: int) -> np.ndarray:
    """Kaiser-window FIR for decimation by ``qi``: 80 dB, passband edge 0.8, stopband edge 1.0 of the output Nyquist."""
    from scipy import signal

    numtaps, beta = signal.kaiserord(80.0, 0.2 / qi)
    numtaps |= 1
    return signal.firwin(numtaps, 0.9 / qi, window=("kaiser", beta))


def _zero_phase_decimate(X: np.ndarray, m: int, closed: bool, h: np.ndarray, qi: int, n_out: int) -> np.ndarray:
    """Every ``qi``-th sample of the stream of rows ``X`` after ``h`` forwards and backwards.

    Forwards then backwards is one convolution with g = h * reversed(h) centred on each
    output sample; it is evaluated only at the kept samples, as ``qi`` polyphase
    correlations (g[p::qi] with stream[p::qi]), block by block.  The stream is continued
    beyond its ends by odd reflection, as ``scipy.signal.filtfilt(padtype="odd")`` does;
    once that padding is at least len(h) - 1 samples, filtfilt's initial filter states no
    longer reach the kept samples and both give the same values (to rounding).
    """
    nc = X.shape[0]
    half = h.size - 1
    g = np.convolve(h, h[::-1])
    phases = [g[p::qi] for p in range(qi)]
    m_out = m // qi
    out = np.empty((nc, n_out))
    per_block = max(1, signal_stream._BLOCK_SAMPLES // m)
    for _, _, a, b in _cycle_blocks(nc, m_out, closed, per_block):
        M = b - a
        e = _stream_window(X, m, a * qi - half, (b - 1) * qi + half + 1)
        y = np.correlate(e[0::qi], phases[0], "valid")[:M]
        for p in range(1, qi):
            y += np.correlate(e[p::qi], phases[p], "valid")[:M]
        _stream_write(out, m_out, a, y)
    return out


def decimate_to(theta_fine, P, step_deg: float | None = None, sample_rate_hz: float | None = None,
                speed_rpm: float | None = None):
    """Low-pass and decimate traces from a fine crank grid to a coarser one.

    Parameters
    ----------
    theta_fine : array_like (n,)
        Uniform fine crank grid, one cycle [deg].
    P : array_like (n_cycles, n) or (n,)
        Signal on the fine grid (any unit); rows are consecutive cycles.
    step_deg : float, optional
        Output crank step [deg]; must be an integer multiple of the fine step.
    sample_rate_hz : float, optional
        Output sample rate [Hz] instead of ``step_deg`` (needs ``speed_rpm``):
        step = 6 N / sample_rate.
    speed_rpm : float, optional
        Engine speed [rpm].

    Returns
    -------
    theta_out : ndarray (n_out,)
    P_out : ndarray (n_cycles, n_out) or (n_out,)

    Notes
    -----
    Anti-alias filter: a linear-phase Kaiser-window FIR designed with
    ``scipy.signal.kaiserord`` for 80 dB attenuation, passband edge at 0.8 and
    stopband edge at 1.0 of the output Nyquist frequency (cut-off 0.9), run
    forwards and backwards (zero phase, attenuation squared) over the cycles
    joined end to end, the record continued beyond its ends by odd reflection
    (3 filter lengths, or the record length if shorter).  Content above the
    output Nyquist frequency is attenuated by at least 160 dB; content below 0.8
    of it passes unchanged to within the design ripple.  The two passes are
    computed as one zero-phase convolution evaluated only at the kept samples;
    for a record shorter than the filter ``scipy.signal.filtfilt`` runs them.
    """
    from scipy import signal

    th = np.asarray(theta_fine, float)
    fine, closed = _grid(th)
    if (step_deg is None) == (sample_rate_hz is None):
        raise CyclesimError("decimate_to: give exactly one of step_deg and sample_rate_hz")
    if step_deg is None:
        if not speed_rpm:
            raise CyclesimError("decimate_to: sample_rate_hz needs speed_rpm")
        step_deg = 6.0 * float(speed_rpm) / float(sample_rate_hz)
    q = step_deg / fine
    qi = int(round(q))
    if qi < 1 or abs(q - qi) > 1e-6 * q:
        raise CyclesimError(
            f"decimate_to: output step {step_deg:g} deg is not an integer multiple of the fine step {fine:g} deg"
        )
    X = np.asarray(P, float)
    single = X.ndim == 1
    if single:
        X = X[None, :]
    m = th.size - 1 if closed else th.size
    if m % qi:
        raise CyclesimError(f"decimate_to: {m} samples per cycle are not divisible by the factor {qi}")
    if qi == 1:
        return th.copy(), (X[0].copy() if single else X.copy())
    h = _antialias_fir(qi)
    th_out = th[::qi]
    if _stream_length(X.shape, m) >= h.size:
        out = _zero_phase_decimate(X, m, closed, h, qi, th_out.size)
    else:
        s = _to_stream(X, closed)
        padlen = min(3 * h.size, s.size - 1)
        y = signal.filtfilt(h, [1.0], s, padtype="odd", padlen=padlen)
        out = _from_stream(y[::qi], (X.shape[0], th_out.size), closed)
    return th_out, (out[0] if single else out)
