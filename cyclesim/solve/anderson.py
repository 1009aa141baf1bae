"""Anderson acceleration of a fixed-point map, vectorised over independent cases.

For a map ``x -> F(x)`` with residual ``g(x) = F(x) - x``, Anderson's method keeps the last
``m`` iterates and residuals of each case and takes the next iterate as

    x_{k+1} = F(x_k) - dF_k gamma_k,   gamma_k = argmin || g_k - dG_k gamma ||_2

where the columns of ``dG_k`` and ``dF_k`` are the differences of successive residuals and
map values (Walker & Ni 2011, SIAM J. Numer. Anal. 49(4), 1715-1735, eq. (2.1)-(2.2) in the
"type II" form with no damping, beta = 1).  The least-squares problem is solved by the
pseudo-inverse (an SVD, rank-deficient columns dropped), one small matrix per case solved on
its own, so a case's iterates depend only on its own history: it gives the same result, to the
digit, alone and in any batch.
"""

from __future__ import annotations

import numpy as np


class Anderson:
    """Anderson acceleration of ``B`` independent fixed-point problems of size ``n``.

    Parameters
    ----------
    memory : int
        Differences kept per case (``m`` of Walker & Ni 2011) [-].
    rcond : float
        Relative cut-off of small singular values in the least-squares solve [-].

    Vectors are arrays (n, B), one column per case, in the caller's scaling (the method is not
    scale-invariant: give every component a comparable size).
    """

    def __init__(self, memory: int = 3, rcond: float = 1e-10):
        if memory < 1:
            raise ValueError("memory must be at least 1")
        self.memory = int(memory)
        self.rcond = float(rcond)
        self._x: list = []      # past iterates (n, B)
        self._f: list = []      # their map values (n, B)
        self._have: np.ndarray | None = None   # per case: how many of the kept pairs are its own
        self.last: np.ndarray | None = None    # per case: whether the last step was accelerated

    def reset(self, which: np.ndarray) -> None:
        """Forget the history of the cases ``which`` (bool (B,))."""
        if self._have is not None:
            self._have = np.where(which, 0, self._have)

    def step(self, x: np.ndarray, fx: np.ndarray, which: np.ndarray | None = None) -> np.ndarray:
        """Record ``(x, F(x))`` and return the next iterate of every case (n, B).

        A case with no earlier pair, or not in ``which`` (bool (B,), default all), gets ``F(x)``
        (a plain fixed-point step); its pair is recorded all the same.
        """
        n, B = x.shape
        if self._have is None:
            self._have = np.zeros(B, dtype=int)
        self._x.append(np.array(x, float))
        self._f.append(np.array(fx, float))
        self._have = self._have + 1
        if len(self._x) > self.memory + 1:
            self._x.pop(0)
            self._f.pop(0)
        self._have = np.minimum(self._have, len(self._x))
        k = len(self._x) - 1                   # differences available in the arrays
        self.last = np.zeros(B, dtype=bool)    # the cases this step accelerated
        if k == 0:
            return np.array(fx, float)
        X = np.stack(self._x, axis=-1)         # (n, B, k+1)
        Fv = np.stack(self._f, axis=-1)
        G = Fv - X
        dG = np.diff(G, axis=-1)               # (n, B, k)
        dF = np.diff(Fv, axis=-1)
        # a case uses only the differences between its own recorded pairs (newest first)
        own = (np.arange(k)[::-1][None, :] < (self._have[:, None] - 1))   # (B, k)
        out = np.array(fx, float)
        wanted = own.any(axis=1) if which is None else own.any(axis=1) & which
        self.last = wanted
        for b in np.flatnonzero(wanted):
            # one small least-squares problem per case, on its own columns only (no stacked
            # linear algebra, whose rounding may depend on the stack)
            cols = np.flatnonzero(own[b])
            A = np.ascontiguousarray(dG[:, b, cols])
            gamma = np.linalg.pinv(A, rcond=self.rcond) @ np.ascontiguousarray(fx[:, b] - x[:, b])
            corr = np.zeros(n)
            for j, c in enumerate(cols):
                corr += dF[:, b, c] * gamma[j]
            out[:, b] = fx[:, b] - corr
        return out
