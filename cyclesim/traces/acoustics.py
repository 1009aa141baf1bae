"""Acoustic modes of a cylindrical chamber: the roots of the Bessel-function derivative and the knock-ringing frequencies they give."""

from __future__ import annotations

import numpy as np


#: Cylinder acoustic modes (m, n): m circumferential, n radial order.
KNOCK_MODES = ((1, 0), (2, 0), (0, 1), (3, 0), (1, 1))


# --------------------------------------------------------------------------- acoustics
def bessel_derivative_root(m: int, n: int) -> float:
    """rho_mn: the root of J'_m belonging to mode (m, n) [-].

    For m >= 1 the n-th radial order is the (n+1)-th positive root of J'_m;
    for m = 0 the trivial root at 0 (no oscillation) is excluded, so (0, 1) is
    the first positive root of J'_0 = -J_1.
    """
    from scipy.special import jnp_zeros

    if m == 0:
        if n < 1:
            raise ValueError("mode (0, 0) does not oscillate")
        return float(jnp_zeros(0, n)[n - 1])
    return float(jnp_zeros(m, n + 1)[n])


def acoustic_mode_frequencies(sound_speed_m_per_s, bore_m: float, modes=KNOCK_MODES) -> np.ndarray:
    """Acoustic mode frequencies of a cylindrical chamber f_mn = c rho_mn / (pi B) [Hz].

    Draper (1938), J. Aeronaut. Sci. 5.  ``sound_speed_m_per_s`` may be an
    array; the result has a trailing axis over ``modes``.
    """
    rho = np.array([bessel_derivative_root(m, n) for m, n in modes])
    c = np.asarray(sound_speed_m_per_s, dtype=float)[..., None]
    return c * rho / (np.pi * bore_m)
