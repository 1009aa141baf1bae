"""The solver's raw output for one batch: states and derivatives at the grid points."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class CycleTrace:
    """Raw solver output for one batch on the integration grid.

    ``Y`` and ``F`` have shape (n_state, B, N+1): states and their crank-angle
    derivatives [unit/deg] at each grid point ``theta`` (N+1,).
    """

    theta: np.ndarray
    Y: np.ndarray
    F: np.ndarray
    names: tuple[str, ...]
    cycles: np.ndarray          # (B,) cycles run to the reported one
    converged: np.ndarray       # (B,) bool
    history: list               # per cycle: (imep_net (B,), m_trapped (B,))
    failed: list                # per case: None or message
    ivc_state: dict = field(default_factory=dict)
    loop: str = ""              # the cycle loop that ran: "compiled", or "numpy (why)"
    accelerated: np.ndarray | None = None   # (B,) cycles that started from an accelerated state
    reported_from_accelerated: np.ndarray | None = None   # (B,) the reported cycle did (a case not settled)

    def row(self, name: str) -> int:
        return self.names.index(name)
