"""The compilation switch of the burned-zone and NO kernels (:mod:`cyclesim.loops.kernel_copy`)."""

from __future__ import annotations

from ..loops.kernel_copy import compiled_wanted, kernels  # noqa: F401 - re-exported
