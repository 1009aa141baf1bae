"""End-gas autoignition (knock) submodels."""

from __future__ import annotations

from cyclesim.roles import Knock


class NoKnock(Knock):
    """No knock model: the end gas is never checked for autoignition."""

    name = "none"
    summary = "no end-gas autoignition model"


SUBMODELS = [NoKnock]
