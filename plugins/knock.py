"""End-gas autoignition (knock) submodels.

``livengood_wu`` integrates the Livengood-Wu knock integral

    I(t) = integral from IVC to t of dt' / tau(p, T_u),

and reports autoignition of the end gas where I reaches 1 (Livengood & Wu
1955).  The ignition delay ``tau`` is the Douaud & Eyzat (1978) correlation
for primary reference fuels,

    tau [ms] = A (ON/100)^3.402 p[atm]^-1.7 exp(B / T_u[K]),
    A = 17.68 ms, B = 3800 K   (coefficients from memory),

evaluated at the cylinder pressure and the end-gas (unburned-zone)
temperature ``T_u``.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from cyclesim.kernel_ops import fresh_charge, where
from cyclesim.params import Param, StateVar
from cyclesim.roles import GasState, Knock, SetupContext

ATM_PA = 101325.0
"""One standard atmosphere [Pa]."""

DE_PREFACTOR_MS = 17.68
"""Douaud-Eyzat prefactor A [ms] (Douaud & Eyzat 1978, from memory)."""
DE_OCTANE_EXPONENT = 3.402
"""Douaud-Eyzat exponent on ON/100 [-] (from memory)."""
DE_PRESSURE_EXPONENT = -1.7
"""Douaud-Eyzat exponent on p [atm] [-] (from memory)."""
DE_ACTIVATION_K = 3800.0
"""Douaud-Eyzat activation temperature B [K] (from memory)."""

DE_OCTANE_RANGE = (80.0, 100.0)
"""Octane numbers of the reference fuels the correlation was fitted to (from memory)."""


def douaud_eyzat_delay_ms(octane_number: Any, p_pa: Any, T_K: Any,
                          prefactor_ms: Any = DE_PREFACTOR_MS,
                          activation_K: Any = DE_ACTIVATION_K) -> np.ndarray:
    """Autoignition delay of the end gas by Douaud & Eyzat (1978).

    Parameters
    ----------
    octane_number : numeric
        Octane number of the fuel (research or, as fitted, PRF number) [-].
    p_pa : numeric
        Pressure [Pa].
    T_K : numeric
        End-gas temperature [K].
    prefactor_ms : numeric, optional
        Prefactor A [ms], default 17.68.
    activation_K : numeric, optional
        Activation temperature B [K], default 3800.

    Returns
    -------
    ndarray
        Ignition delay tau [ms], ``A (ON/100)^3.402 (p/1 atm)^-1.7 exp(B/T)``.

    Notes
    -----
    Fitted to knock onset of primary reference fuels in a CFR engine, octane
    numbers of about 80 to 100 (range and coefficients from memory).

    References
    ----------
    Douaud, A. M., Eyzat, P. (1978). Four-octane-number method for predicting
    the anti-knock behavior of fuels and engines. SAE 780080.
    """
    on = np.asarray(octane_number, dtype=float)
    p_atm = np.asarray(p_pa, dtype=float) / ATM_PA
    T = np.asarray(T_K, dtype=float)
    return (prefactor_ms * (on / 100.0) ** DE_OCTANE_EXPONENT
            * p_atm ** DE_PRESSURE_EXPONENT * np.exp(activation_K / T))


def isentropic_temperature(gas: Any, T0: Any, p_ratio: Any, iterations: int = 4) -> np.ndarray:
    """Temperature of the fresh charge after an isentropic change of pressure.

    Parameters
    ----------
    gas : cyclesim.solve.gas_tables.GasTables
        Property tables; ``gas.unburned(T) -> (u, cv, R)`` is used, for arrays
        of shape (B,).
    T0 : ndarray (B,)
        Temperature at the start [K].
    p_ratio : ndarray (B,)
        Pressure ratio p / p0 [-].
    iterations : int
        Fixed-point passes; each cuts the error about ninefold, 4 leave about
        0.01 K for a compression to 40 times the pressure.

    Returns
    -------
    ndarray (B,)
        ``T = T0 exp((R / cp_m) ln(p / p0))`` [K].

    Notes
    -----
    For an ideal gas with temperature-dependent cp, an isentrope obeys
    ``integral of cp dT/T = R ln(p/p0)``.  The mean of cp over ln T is taken
    as cp at the logarithmic mean temperature ``(T - T0)/ln(T/T0)``, exact
    for cp linear in T (the fresh charge's cp is nearly so between 300 and
    1000 K), and the implicit relation solved by fixed-point iteration
    started from ``cp/R = 3.5``.
    """
    T0 = np.asarray(T0, dtype=float)
    return isentrope_temperature(gas, T0, np.log(np.asarray(p_ratio, dtype=float)), iterations)


def isentrope_temperature(gas, T0, lnr, iterations):
    """:func:`isentropic_temperature` from ``lnr = ln(p / p0)`` in kernel form (arrays or floats;
    ``gas`` as :func:`cyclesim.kernel_ops.fresh_charge` takes it)."""
    T = T0 * np.exp(lnr / 3.5)
    for _ in range(iterations):
        _, cv, R = fresh_charge(gas, log_mean_of(T0, T))
        T = T0 * np.exp(R / (cv + R) * lnr)
    return T


def log_mean_of(T0, T1):
    """:func:`log_mean_temperature` in kernel form (arrays or floats)."""
    ln = np.log(T1 / T0)
    small = np.abs(ln) < 1e-6
    return where(small, np.sqrt(T0 * T1), (T1 - T0) / where(small, 1.0, ln))


def livengood_wu_rate(p, x_b, closed, T_ivc, p_ivc, T_u, gas, pre_ms, act, x_max, atm, p_exp):
    """dI/dt [1/s] of the Livengood-Wu integral, ``1 / tau`` of the Douaud-Eyzat delay at the
    cylinder pressure and the end-gas temperature, while the cylinder is closed and
    ``x_b < x_max``: the state kernel of :class:`LivengoodWu` (``pre_ms`` = A (ON/100)^3.402 c [ms]).
    The end gas is the unburned zone's own ``T_u`` where two zones run (``T_u > 0``), else the
    fresh charge on its isentrope from IVC."""
    T_u = where(T_u > 0.0, T_u, isentrope_temperature(gas, T_ivc, np.log(p / p_ivc), 4))
    tau_ms = pre_ms * (p / atm) ** p_exp * np.exp(act / T_u)
    rate = 1e3 / tau_ms
    return where(closed & (x_b < x_max) & np.isfinite(rate), rate, 0.0)


def log_mean_temperature(T0: Any, T1: Any) -> np.ndarray:
    """Logarithmic mean ``(T1 - T0) / ln(T1 / T0)`` [K] (the geometric mean where T1 ~ T0).

    A specific heat linear in T, averaged over ln T between T0 and T1, equals
    its value at this temperature; so it is the point at which to evaluate
    cp (or cv) for an isentrope.
    """
    return log_mean_of(np.asarray(T0, dtype=float), np.asarray(T1, dtype=float))


def _arr(value: Any, B: int) -> np.ndarray:
    return np.broadcast_to(np.asarray(value, dtype=float), (B,)).copy()


class NoKnock(Knock):
    """No knock model: the end gas is never checked for autoignition."""

    name = "none"
    summary = "no end-gas autoignition model"
    compiled_form = "none"


class LivengoodWu(Knock):
    """Livengood-Wu knock integral of the Douaud-Eyzat ignition delay.

    Parameters
    ----------
    values : mapping
        ``octane_number`` [-], ``delay_multiplier`` [-],
        ``min_unburned_fraction`` [-], ``activation_temperature_K`` [K],
        ``intensity_factor`` [-], each (B,).
    ctx : SetupContext
        Batch set-up context (uses ``gas``, ``events.ivc`` and ``events.evo``).

    Notes
    -----
    *State.*  One integrated state ``knock.I`` [-], reset to 0 at each intake
    valve closing, with

        dI/dt = 1 / (c tau(ON, p, T_u))   [1/s]

    while the cylinder is closed and more than ``min_unburned_fraction`` of
    the charge is unburned (``1 - x_b``), else 0; ``c`` is
    ``delay_multiplier``.  Autoignition (knock onset) is where I reaches 1.

    *End-gas temperature.*  The end gas is taken as compressed isentropically
    from its state at IVC (``p_ivc``, ``T_ivc``): compression, then the
    pressure rise from burning elsewhere in the chamber.  Instead of
    integrating ``dT_u/dt = (R/cp) T_u (dp/dt)/p``, which needs dp/dt that
    the solver does not provide, the closed form of the same isentrope is
    used, ``T_u = T_ivc exp((R/cp_m) ln(p/p_ivc))`` with the fresh-charge
    cp at the logarithmic mean temperature, solved in four fixed-point passes (see
    :func:`isentropic_temperature`).  This needs no extra state and cannot
    drift.  It neglects heat loss from the end gas (so T_u is an upper
    estimate, common practice for a single-zone knock check) and uses the
    fresh-charge properties for the residual-diluted end gas.  Where the
    cylinder runs two zones (``simulation.zones: two``) the end gas is the
    unburned zone's own temperature instead (the state field ``T_u``: its
    entropy with its share of the wall heat, residual included).

    *Cut-off.*  The integral counts only while at least
    ``min_unburned_fraction`` (default 0.1) of the charge is unburned: once
    the flame has consumed about 90 % of the charge, autoignition of the
    rest releases little energy and the remaining gas sits largely in the
    cool wall layers and crevices (common practice; the value is a choice).

    *Figures.*  ``knock_onset_deg`` (first crank angle where I = 1, linear
    interpolation on the trace; NaN if none), ``knock_integral_max``,
    ``knock_integral_margin = 1 - max I``, ``knock_unburned_fraction_at_onset``
    (``1 - x_b`` there; NaN if none), ``knock_intensity`` =
    ``intensity_factor x (1 - x_b at onset)``, i.e. with the default factor 1
    the share of the charge's releasable fuel energy still in the end gas
    at onset (0 without knock), ``end_gas_temperature_max_K`` (highest T_u
    while the integral counts) and ``end_gas_temperature_at_onset_K``.
    All are taken over IVC..EVO of the reported cycle.

    *Validity.*  Douaud & Eyzat fitted primary reference fuels of octane
    number about 80-100 in a CFR engine (from memory); outside that a
    warning is given.  The correlation is a single-stage Arrhenius fit: it
    does not describe two-stage (cool-flame) ignition or negative
    temperature coefficient behaviour.
    """

    name = "livengood_wu"
    summary = "Livengood-Wu knock integral of the Douaud-Eyzat ignition delay, isentropic end gas"
    state_kernel = livengood_wu_rate
    # the integral stops where the unburned fraction reaches its minimum, a jump in its rate
    # whose error grows with the step: keep the fine step through the closed part
    closed_step_limit = 1
    params = (
        Param("octane_number", "-", 95.0, "fuel octane number in the Douaud-Eyzat delay",
              min=40.0, max=120.0),
        Param("delay_multiplier", "-", 1.0, "calibration multiplier on the ignition delay",
              min=0.0, max=1e6, min_exclusive=True),
        Param("min_unburned_fraction", "-", 0.1,
              "the integral counts only while at least this fraction of the charge is unburned",
              min=0.0, max=1.0, max_exclusive=True),
        Param("activation_temperature_K", "K", DE_ACTIVATION_K,
              "activation temperature B in the Douaud-Eyzat delay", min=0.0, max=20000.0,
              min_exclusive=True),
        Param("intensity_factor", "-", 1.0,
              "knock intensity = factor x unburned fraction at onset", min=0.0),
    )
    references = (
        "Livengood, J. C., Wu, P. C. (1955). Correlation of autoignition phenomena in "
        "internal combustion engines and rapid compression machines. Fifth Symposium "
        "(International) on Combustion, 347-356.",
        "Douaud, A. M., Eyzat, P. (1978). Four-octane-number method for predicting the "
        "anti-knock behavior of fuels and engines. SAE 780080 (coefficients from memory).",
    )

    STATE = "I"

    def __init__(self, values: Mapping[str, Any], ctx: SetupContext) -> None:
        super().__init__(values, ctx)
        B = self.B
        self.on = _arr(self.p.octane_number, B)
        self.mult = _arr(self.p.delay_multiplier, B)
        self.x_max = 1.0 - _arr(self.p.min_unburned_fraction, B)
        self.act = _arr(self.p.activation_temperature_K, B)
        self.factor = _arr(self.p.intensity_factor, B)
        # A (ON/100)^3.402 c  [ms], the part of the delay fixed per case
        self._pre_ms = DE_PREFACTOR_MS * (self.on / 100.0) ** DE_OCTANE_EXPONENT * self.mult

    # -- integrated state ----------------------------------------------
    def states(self):
        return (StateVar(self.STATE, "-", initial=0.0, reset_at_ivc=True),)

    def pack(self) -> dict:
        """The state kernel's parameters (:func:`livengood_wu_rate`) by name."""
        return {"pre_ms": self._pre_ms, "act": self.act, "x_max": self.x_max, "atm": ATM_PA,
                "p_exp": DE_PRESSURE_EXPONENT}

    def end_gas_temperature(self, s: GasState) -> np.ndarray:
        """End-gas temperature [K] (B,): the unburned zone's where two zones run, else the fresh
        charge isentropic from the IVC state."""
        return where(np.asarray(s.T_u) > 0.0, s.T_u, isentropic_temperature(self.ctx.gas, s.T_ivc, s.p / s.p_ivc))

    # -- figures --------------------------------------------------------
    def _window(self, trace: Mapping[str, np.ndarray]):
        """Crank grid (B, n), mask of IVC..EVO, and p [Pa], T [K] at IVC per case."""
        th = np.broadcast_to(np.asarray(trace["crank_deg"], float), np.shape(trace[f"{self.role}.{self.STATE}"]))
        ivc = _arr(self.ctx.events.ivc, self.B)
        evo = _arr(self.ctx.events.evo, self.B)
        win = (th >= ivc[:, None] - 1e-9) & (th <= evo[:, None] + 1e-9)
        p = np.asarray(trace["pressure_bar"], float) * 1e5
        T = np.asarray(trace["temperature_K"], float)
        p_ivc = np.array([np.interp(ivc[b], th[b], p[b]) for b in range(self.B)])
        T_ivc = np.array([np.interp(ivc[b], th[b], T[b]) for b in range(self.B)])
        return th, win, p, p_ivc, T_ivc

    def _analyse(self, trace: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        I = np.asarray(trace[f"{self.role}.{self.STATE}"], float)
        xb = np.asarray(trace["mfb"], float)
        th, win, p, p_ivc, T_ivc = self._window(trace)
        B, n = I.shape
        gas = self.ctx.gas
        # end-gas temperature on the trace, same closed form as in the integration
        ratio = np.where(win, p / p_ivc[:, None], 1.0)
        Tu = isentropic_temperature(gas, np.broadcast_to(T_ivc[:, None], ratio.shape), ratio)
        if "unburned_temperature_K" in trace:   # two zones: the unburned zone's own temperature
            Tu = np.where(win, np.asarray(trace["unburned_temperature_K"], float), Tu)
        counting = win & (xb < self.x_max[:, None])
        Iw = np.where(win, I, -np.inf)
        out = {
            "onset": np.full(B, np.nan), "unb": np.full(B, np.nan), "Tu_on": np.full(B, np.nan),
            "p_on": np.full(B, np.nan),
            "Imax": np.max(Iw, axis=1),
            "Tu_max": np.max(np.where(counting, Tu, -np.inf), axis=1),
        }
        out["Tu_max"] = np.where(np.isfinite(out["Tu_max"]), out["Tu_max"], np.nan)
        for b in range(B):
            hit = np.flatnonzero(win[b] & (I[b] >= 1.0))
            if hit.size == 0:
                continue
            j = hit[0]
            if j == 0 or not win[b, j - 1]:
                w, j0 = 0.0, j
            else:
                j0 = j - 1
                w = (1.0 - I[b, j0]) / max(I[b, j] - I[b, j0], 1e-300)
            lerp = lambda a: a[b, j0] + w * (a[b, j] - a[b, j0])  # noqa: E731
            out["onset"][b] = lerp(th)
            out["unb"][b] = 1.0 - lerp(xb)
            out["Tu_on"][b] = lerp(Tu)
            out["p_on"][b] = lerp(p)
        return out

    def figures(self, trace: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Knock onset, integral maximum and margin, unburned fraction and intensity, end-gas T."""
        a = self._analyse(trace)
        knocked = np.isfinite(a["onset"])
        return {
            "knock_onset_deg": a["onset"],
            "knock_integral_max": a["Imax"],
            "knock_integral_margin": 1.0 - a["Imax"],
            "knock_unburned_fraction_at_onset": a["unb"],
            "knock_intensity": np.where(knocked, self.factor * np.nan_to_num(a["unb"]), 0.0),
            "end_gas_temperature_max_K": a["Tu_max"],
            "end_gas_temperature_at_onset_K": a["Tu_on"],
        }

    def warnings(self, trace: Mapping[str, np.ndarray]) -> list[list[str]]:
        """Octane number outside the fitted range; predicted autoignition."""
        out: list[list[str]] = [[] for _ in range(self.B)]
        lo, hi = DE_OCTANE_RANGE
        for b in np.flatnonzero((self.on < lo) | (self.on > hi)):
            out[b].append(
                f"knock model: octane number {self.on[b]:g} is outside the about {lo:g}-{hi:g}"
                " of the reference fuels the Douaud-Eyzat delay was fitted to (range from memory)"
            )
        a = self._analyse(trace)
        for b in np.flatnonzero(np.isfinite(a["onset"])):
            out[b].append(
                f"knock model: end-gas autoignition predicted at {a['onset'][b]:.1f} deg with"
                f" {100 * a['unb'][b]:.0f} % of the charge unburned"
                f" (end gas {a['Tu_on'][b]:.0f} K, {a['p_on'][b] / 1e5:.0f} bar)"
            )
        return out


SUBMODELS = [NoKnock, LivengoodWu]
