"""Burn-rate laws of the Wiebe family, and the motored (no-burn) law.

The Wiebe function gives the mass fraction burned of the charge as

    x_b(theta) = 1 - exp(-a u^(m+1)),   u = (theta - theta0) / dtheta,

for ``theta0 <= theta``, zero before.  ``theta0`` is the start of burning,
``dtheta`` the burn duration, ``a`` the efficiency parameter
(``x_b(dtheta) = 1 - exp(-a)``) and ``m`` the form factor.  Burning stops at
the end of the exhaust stroke (``theta >= 360`` deg), where the next cycle's
charge begins; the rate is zero there and the closed-form fraction holds its
value.

All laws here return the *progress* of burning (0..1).  The fuel energy
released up to ``theta`` is ``combustion_efficiency x m_fuel x LHV x x_b``;
the efficiency does not change the shape.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from cyclesim.kernel_ops import where
from cyclesim.params import Param
from cyclesim.roles import BurnRate, GasState, SetupContext

CYCLE_END_DEG = 360.0
"""End of the exhaust stroke [deg]: no burning at or after it."""

NEVER_DEG = 1.0e9
"""Start angle [deg] of a law that never burns."""

_WIEBE_REFS = (
    "Wiebe, I. I. (1970). Brennverlauf und Kreisprozess von Verbrennungsmotoren. "
    "VEB Verlag Technik, Berlin (bibliographic details from memory).",
    "Heywood, J. B. (1988). Internal Combustion Engine Fundamentals, McGraw-Hill, ch. 9 "
    "(Wiebe function, typical a = 5, m = 2).",
)


def _arr(value: Any, B: int) -> np.ndarray:
    """Broadcast a parameter value to a float array of shape (B,)."""
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


def fraction_point(x: float | np.ndarray, a: Any, m: Any) -> np.ndarray:
    """Normalised crank angle at which the Wiebe law reaches a burned fraction.

    Parameters
    ----------
    x : float or ndarray
        Burned fraction, 0 <= x < 1 [-].
    a, m : float or ndarray
        Wiebe efficiency and form parameters [-].

    Returns
    -------
    ndarray
        ``(theta_x - theta0) / dtheta = (-ln(1 - x) / a)^(1/(m+1))`` [-].
    """
    a = np.asarray(a, dtype=float)
    m = np.asarray(m, dtype=float)
    return (-np.log1p(-np.asarray(x, dtype=float)) / a) ** (1.0 / (m + 1.0))


def wiebe_fraction(theta_deg: Any, theta0: Any, duration: Any, a: Any, m: Any) -> np.ndarray:
    """Closed-form Wiebe burned fraction (broadcasting, no end-of-cycle cut).

    Parameters
    ----------
    theta_deg : float or ndarray
        Crank angle [deg].
    theta0 : float or ndarray
        Start of burning [deg].
    duration : float or ndarray
        Burn duration dtheta [deg], > 0.
    a, m : float or ndarray
        Efficiency and form parameters [-].

    Returns
    -------
    ndarray
        Burned fraction x_b [-], zero before ``theta0``.
    """
    u = np.maximum((np.asarray(theta_deg, dtype=float) - theta0) / duration, 0.0)
    return -np.expm1(-a * u ** (m + 1.0))


def wiebe_rate(theta_deg: Any, theta0: Any, duration: Any, a: Any, m: Any) -> np.ndarray:
    """Wiebe burn rate dx_b/dtheta (broadcasting, no end-of-cycle cut).

    Parameters
    ----------
    theta_deg : float or ndarray
        Crank angle [deg].
    theta0, duration, a, m : float or ndarray
        As in :func:`wiebe_fraction` [deg, deg, -, -].

    Returns
    -------
    ndarray
        dx_b/dtheta [1/deg], zero before ``theta0``.
    """
    return wiebe_term(np.asarray(theta_deg, dtype=float), theta0, duration, a, m)


def wiebe_term(theta, theta0, duration, a, m):
    """:func:`wiebe_rate` as a kernel helper (floats or arrays, no conversion) [1/deg]."""
    u = (theta - theta0) / duration
    on = u > 0.0
    up = where(on, u, 0.0)
    um = up ** m
    return where(on, a * (m + 1.0) / duration * um * np.exp(-a * um * up), 0.0)


def double_wiebe_kernel(theta, theta0, d1, a, m1, f1, start2, d2, m2):
    """Two-Wiebe burn rate dx_b/dtheta [1/deg], zero from 360 deg: the kernel of :class:`DoubleWiebe`
    (``f1`` [-] the first function's share, ``start2`` [deg] the second's start, durations [deg])."""
    r = f1 * wiebe_term(theta, theta0, d1, a, m1) + (1.0 - f1) * wiebe_term(theta, start2, d2, a, m2)
    return where(theta < CYCLE_END_DEG, r, 0.0)


def wiebe_kernel(theta, theta0, inv_dur, c, a, m):
    """Single-Wiebe burn rate dx_b/dtheta [1/deg], zero before ``theta0`` and from 360 deg: the
    kernel of :class:`Wiebe` (arrays on the Python path, floats in the compiled loop).

    Parameters
    ----------
    theta : float or ndarray
        Crank angle [deg].
    theta0 : ndarray
        Start of burning [deg].
    inv_dur : ndarray
        Reciprocal of the burn duration [1/deg].
    c : ndarray
        ``a (m + 1) / duration`` [1/deg].
    a, m : ndarray
        Wiebe efficiency and form parameters [-].
    """
    u = (theta - theta0) * inv_dur
    on = (u > 0.0) & (theta < CYCLE_END_DEG)
    up = where(on, u, 0.0)
    um = up ** m
    return where(on, c * um * np.exp(-a * um * up), 0.0)


def _grid(theta_deg: Any) -> np.ndarray:
    """A crank grid as (1, n) (from (n,)) or unchanged (B, n)."""
    th = np.asarray(theta_deg, dtype=float)
    return th[None, :] if th.ndim == 1 else th


# -- shared parameters -------------------------------------------------------

P_A = Param("a", "-", 5.0, "Wiebe efficiency parameter: x_b(duration) = 1 - exp(-a)",
            min=0.0, max=20.0, min_exclusive=True)
P_M = Param("m", "-", 2.0, "Wiebe form factor (larger = later, steeper burning)",
            min=0.0, max=10.0)
P_EFF = Param("combustion_efficiency", "-", 0.97,
              "share of the charge that burns (unburned hydrocarbons leave the rest); a rich charge"
              " releases less still, its CO and H2: the summary's combustion_efficiency is the total",
              min=0.0, max=1.0)
P_SPARK = Param("spark_advance_deg", "deg", 25.0,
                "spark timing in crank degrees before firing TDC (positive = before)",
                min=-30.0, max=80.0)
P_DELAY = Param("ignition_delay_deg", "deg", 8.0,
                "crank angle from spark to the start of burning", min=0.0, max=60.0)


class _WiebeLaw(BurnRate):
    """Common behaviour: efficiency, cycle-end cut, burn-completion warning."""

    theta0: np.ndarray
    eff: np.ndarray

    def combustion_efficiency(self) -> np.ndarray:
        """Fraction of the charge's fuel energy that is released (B,) [-]."""
        return self.eff.copy()

    def start_deg(self) -> np.ndarray:
        """Start of burning [deg] (B,)."""
        return self.theta0.copy()

    def _cut_theta(self, th: np.ndarray) -> np.ndarray:
        return np.minimum(th, CYCLE_END_DEG)

    def warnings(self, trace: Mapping[str, np.ndarray]) -> list[list[str]]:
        """Warn where less than 99 % is burned at exhaust valve opening."""
        out: list[list[str]] = [[] for _ in range(self.B)]
        evo = getattr(getattr(self.ctx, "events", None), "evo", None)
        if evo is None:
            return out
        evo = _arr(evo, self.B)
        x = self.fraction(evo[:, None])[:, 0]
        for i in np.flatnonzero(x < 0.99):
            out[i].append(
                f"burn law: only {100 * x[i]:.1f} % burned at exhaust valve opening"
                f" ({evo[i]:g} deg); the rest of the charge leaves unburned"
            )
        return out


class Wiebe(_WiebeLaw):
    """Single Wiebe burn law timed by spark advance and ignition delay.

    Parameters
    ----------
    values : mapping
        ``spark_advance_deg`` [deg before TDC], ``ignition_delay_deg`` [deg],
        ``duration_deg`` [deg], ``a`` [-], ``m`` [-],
        ``combustion_efficiency`` [-], each (B,).
    ctx : SetupContext
        Batch set-up context (only ``B`` and ``events.evo`` are used).

    Notes
    -----
    Start of burning ``theta0 = -spark_advance + ignition_delay`` [deg].
    Defaults a = 5, m = 2 are the textbook SI values (Heywood 1988, ch. 9).
    """

    name = "wiebe"
    summary = "single Wiebe function from spark advance, ignition delay and burn duration"
    kernel = wiebe_kernel
    spark_param = "spark_advance_deg"

    @classmethod
    def shortest_feature_deg_for(cls, params: Mapping[str, Any]) -> float | None:
        """The burn duration [deg]."""
        return float(params["duration_deg"])
    params = (
        P_SPARK,
        P_DELAY,
        Param("duration_deg", "deg", 50.0, "burn duration dtheta of the Wiebe function",
              min=0.0, max=360.0, min_exclusive=True),
        P_A,
        P_M,
        P_EFF,
    )
    references = _WIEBE_REFS

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        B = self.B
        self.spark = -_arr(self.p.spark_advance_deg, B)
        self.theta0 = self.spark + _arr(self.p.ignition_delay_deg, B)
        self.duration = _arr(self.p.duration_deg, B)
        self.a = _arr(self.p.a, B)
        self.m = _arr(self.p.m, B)
        self.eff = _arr(self.p.combustion_efficiency, B)
        self._setup_rate()

    def _setup_rate(self) -> None:
        self._inv_dur = 1.0 / self.duration
        self._c = self.a * (self.m + 1.0) * self._inv_dur

    def pack(self) -> dict:
        """The kernel's parameters as arrays (B,) by name (:func:`wiebe_kernel`)."""
        return {"theta0": self.theta0, "inv_dur": self._inv_dur, "c": self._c, "a": self.a, "m": self.m}

    def spark_deg(self) -> np.ndarray:
        """Spark timing as a crank angle [deg] (negative = before TDC) (B,)."""
        return self.spark.copy()

    def fraction(self, theta_deg: np.ndarray) -> np.ndarray:
        """Burned fraction x_b [-] on a crank grid [deg], (n,) or (B, n) -> (B, n)."""
        th = self._cut_theta(_grid(theta_deg))
        return wiebe_fraction(th, self.theta0[:, None], self.duration[:, None],
                              self.a[:, None], self.m[:, None])


class WiebeCA50(Wiebe):
    """Single Wiebe burn law specified by its phasing (CA50 and 10-90 % duration).

    Parameters
    ----------
    values : mapping
        ``ca50_deg`` [deg], ``burn_10_90_deg`` [deg], ``a`` [-], ``m`` [-],
        ``combustion_efficiency`` [-], ``ignition_delay_deg`` [deg], each (B,).
    ctx : SetupContext
        Batch set-up context.

    Notes
    -----
    With ``u_x = (-ln(1-x)/a)^(1/(m+1))`` the normalised angle of fraction x,
    the Wiebe law has ``dtheta = burn_10_90 / (u_90 - u_10)`` and
    ``theta0 = CA50 - u_50 dtheta``.  The ignition delay only sets the
    reported spark timing, ``theta0 - ignition_delay``.
    """

    name = "wiebe_ca50"
    summary = "single Wiebe function from 50 % burned angle and 10-90 % burn duration"
    spark_param = None          # timed by its CA50, not by a spark parameter

    @classmethod
    def shortest_feature_deg_for(cls, params: Mapping[str, Any]) -> float | None:
        """The 10-90 % burn duration [deg]."""
        return float(params["burn_10_90_deg"])
    params = (
        Param("ca50_deg", "deg", 8.0, "crank angle of 50 % mass burned (positive = after TDC)",
              min=-40.0, max=90.0),
        Param("burn_10_90_deg", "deg", 25.0, "crank angle from 10 % to 90 % mass burned",
              min=0.0, max=180.0, min_exclusive=True),
        P_A,
        P_M,
        P_EFF,
        Param("ignition_delay_deg", "deg", 8.0,
              "spark to start of burning; only used to report the spark timing",
              min=0.0, max=60.0),
    )
    references = _WIEBE_REFS

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super(Wiebe, self).__init__(values, ctx)
        B = self.B
        self.a = _arr(self.p.a, B)
        self.m = _arr(self.p.m, B)
        self.eff = _arr(self.p.combustion_efficiency, B)
        u10, u50, u90 = (fraction_point(x, self.a, self.m) for x in (0.1, 0.5, 0.9))
        self.duration = _arr(self.p.burn_10_90_deg, B) / (u90 - u10)
        self.theta0 = _arr(self.p.ca50_deg, B) - u50 * self.duration
        self.spark = self.theta0 - _arr(self.p.ignition_delay_deg, B)
        self._setup_rate()


class DoubleWiebe(_WiebeLaw):
    """Sum of two Wiebe functions (fast first stage plus slower second stage).

    Parameters
    ----------
    values : mapping
        ``spark_advance_deg``, ``ignition_delay_deg`` [deg]; ``first_fraction``
        [-] (share of the charge burned by the first function);
        ``first_duration_deg``, ``first_m``; ``second_offset_deg`` (start of the
        second function after the first) [deg], ``second_duration_deg``,
        ``second_m``; shared ``a`` [-] and ``combustion_efficiency`` [-].
    ctx : SetupContext
        Batch set-up context.

    Notes
    -----
    ``x_b = f W(theta; theta0, d1, a, m1) + (1 - f) W(theta; theta0 + off, d2, a, m2)``.
    The two-function form follows Miyamoto et al. (1985), who wrote it for
    premixed plus diffusion burning in diesel engines; for spark ignition it
    describes a fast main burn with a slow tail.  The defaults are
    illustrative, not fitted values from that paper.
    """

    name = "double_wiebe"
    summary = "two Wiebe functions with a split fraction (main burn plus slow tail)"
    kernel = double_wiebe_kernel
    spark_param = "spark_advance_deg"

    @classmethod
    def shortest_feature_deg_for(cls, params: Mapping[str, Any]) -> float | None:
        """The shorter of the two durations [deg]."""
        return min(float(params["first_duration_deg"]), float(params["second_duration_deg"]))
    params = (
        P_SPARK,
        P_DELAY,
        Param("first_fraction", "-", 0.8, "share of the charge burned by the first function",
              min=0.0, max=1.0),
        Param("first_duration_deg", "deg", 45.0, "duration of the first function",
              min=0.0, max=360.0, min_exclusive=True),
        Param("first_m", "-", 2.0, "form factor of the first function", min=0.0, max=10.0),
        Param("second_offset_deg", "deg", 10.0,
              "start of the second function after the start of the first",
              min=0.0, max=180.0),
        Param("second_duration_deg", "deg", 80.0, "duration of the second function",
              min=0.0, max=360.0, min_exclusive=True),
        Param("second_m", "-", 1.0, "form factor of the second function", min=0.0, max=10.0),
        P_A,
        P_EFF,
    )
    references = _WIEBE_REFS + (
        "Miyamoto, N., Chikahisa, T., Murayama, T., Sawyer, R. (1985). Description and "
        "analysis of diesel engine rate of combustion and performance using Wiebe's "
        "functions. SAE 850107.",
    )

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        B = self.B
        p = self.p
        self.spark = -_arr(p.spark_advance_deg, B)
        self.theta0 = self.spark + _arr(p.ignition_delay_deg, B)
        self.f1 = _arr(p.first_fraction, B)
        self.a = _arr(p.a, B)
        self.eff = _arr(p.combustion_efficiency, B)
        self.d1 = _arr(p.first_duration_deg, B)
        self.m1 = _arr(p.first_m, B)
        self.start2 = self.theta0 + _arr(p.second_offset_deg, B)
        self.d2 = _arr(p.second_duration_deg, B)
        self.m2 = _arr(p.second_m, B)

    def pack(self) -> dict:
        """The kernel's parameters as arrays (B,) by name (:func:`double_wiebe_kernel`)."""
        return {"theta0": self.theta0, "d1": self.d1, "a": self.a, "m1": self.m1, "f1": self.f1,
                "start2": self.start2, "d2": self.d2, "m2": self.m2}

    def spark_deg(self) -> np.ndarray:
        """Spark timing as a crank angle [deg] (negative = before TDC) (B,)."""
        return self.spark.copy()

    def fraction(self, theta_deg: np.ndarray) -> np.ndarray:
        """Burned fraction x_b [-] on a crank grid [deg], (n,) or (B, n) -> (B, n)."""
        th = self._cut_theta(_grid(theta_deg))
        c = lambda v: v[:, None]  # noqa: E731
        return (c(self.f1) * wiebe_fraction(th, c(self.theta0), c(self.d1), c(self.a), c(self.m1))
                + c(1.0 - self.f1) * wiebe_fraction(th, c(self.start2), c(self.d2), c(self.a),
                                                     c(self.m2)))


class NoBurn(BurnRate):
    """Motored engine: nothing burns.

    Parameters
    ----------
    values : mapping
        No parameters.
    ctx : SetupContext
        Batch set-up context.
    """

    name = "none"
    summary = "motored engine: no combustion"
    compiled_form = "none"

    @classmethod
    def shortest_feature_deg_for(cls, params: Mapping[str, Any]) -> float | None:
        """Nothing burns: no feature."""
        return None
    params = ()
    references = ()

    def start_deg(self) -> np.ndarray:
        """Start of burning [deg]: never (a very late angle) (B,)."""
        return np.full(self.B, NEVER_DEG)

    def combustion_efficiency(self) -> np.ndarray:
        """Released fraction of fuel energy: zero (B,) [-]."""
        return np.zeros(self.B)

    def rate(self, s: GasState) -> np.ndarray:
        """Burn rate [1/deg]: zero (B,)."""
        return np.zeros(self.B)

    def fraction(self, theta_deg: np.ndarray) -> np.ndarray:
        """Burned fraction [-]: zero on the grid, (B, n)."""
        th = _grid(theta_deg)
        return np.zeros((self.B, th.shape[-1]))


SUBMODELS = [Wiebe, WiebeCA50, DoubleWiebe, NoBurn]

