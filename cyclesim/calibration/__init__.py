"""Calibration: fit submodel parameters to measured cylinder-pressure traces.

>>> from cyclesim.calibration import fit
>>> res = fit("demo", "trace.npz", ["burn.ignition_delay_deg", "burn.duration_deg",
...                                 "operating.ivc_pressure_bar"])
>>> print(res.text())
>>> res.write("calibration")            # calibrated.yaml, calibration.json, plots

The measured cycles are pegged and phased by the reference analyser
(:mod:`cyclesim.traces.analysis`), averaged over the fired cycles
(``ensemble="mean"``) or taken one by one (``ensemble="each"``), and the chosen
parameters are fitted by bounded least squares to the residual

    r_i = sqrt(w(theta_i)) (p_sim(theta_i) - p_meas(theta_i))       [bar]

on the measurement's own crank grid (the simulated trace is written on a grid
finer than the measurement's by Hermite interpolation and read at the
measured angles by linear interpolation), and/or to the same difference of
the *apparent* heat release, which the analyser computes from the simulated
pressure exactly as from the measured one (same volume, same gamma(T), same
IVC state), so that the analyser's simplifications cancel.  Heat-release
residuals are divided by ``V_d x 1 bar`` so that they read in bar like the
pressure residuals (J / (m^3 Pa) = bar-equivalent).

Solver
------
A Levenberg-Marquardt iteration with Marquardt's diagonal scaling
(Marquardt 1963, J. SIAM 11:431) and simple bounds, run in lockstep over
independent problems (the cycles of ``ensemble="each"``, or one problem):

* the Jacobian is a one-sided finite difference, and every case an iteration
  needs (the trial point of each problem and its perturbed neighbours, one
  per parameter) is simulated in **one** :func:`cyclesim.simulate` batch.
  The trial point's Jacobian is thus ready when the step is accepted; a
  rejected step only raises the damping.
* bounds come from the submodels' (and core sections') declared ``Param``
  ranges; a step is projected onto them, and a parameter at a bound whose
  gradient points outward is held there for that step (active set).

This was chosen over ``scipy.optimize.least_squares`` because the cycles of
``ensemble="each"`` and the points of :func:`fit_points` then share one batch
per iteration (a closed-cycle batch of a hundred cases costs about as much as
one case), which scipy's one-problem-at-a-time interface cannot do.

Confidence intervals
--------------------
At the solution, ``C = s^2 (J^T J)^-1`` with ``s^2 = SSR / (n - p)`` and
t-distribution intervals with ``n - p`` degrees of freedom (e.g. Bates & Watts
1988, *Nonlinear Regression Analysis and its Applications*, Wiley, sec. 2.3).
This assumes independent residuals.  Residuals on a fine crank grid are
rarely independent: a smooth misfit (sensor thermal drift, a model error)
spans many samples.  ``covariance="hac"`` gives the heteroskedasticity and
autocorrelation consistent (sandwich) estimate with Bartlett weights (Newey &
West 1987, Econometrica 55:703), ``C = (J^T J)^-1 S (J^T J)^-1``, with the lag
window L the first lag at which the residual autocorrelation falls to zero
(common practice), and ``n_eff = n (1 + 2 sum rho_l)^-1`` degrees of freedom
for the t quantile.  Both are always computed; ``covariance`` chooses which one
the intervals and ``calibration.json`` carry (default ``hac``: on white residuals
it agrees with the classical estimate, on smooth ones it is the honest one).

Neither sees a *systematic* error that the model lacks: it biases the values
the same way in every cycle.  Two remedies:

* measurement terms (``nuisance``) estimated with the parameters, linear in
  the pressure and profiled out by variable projection (Golub & Pereyra 1973):
  a constant offset (pegging error), a gain, and the sensor's thermal shock as
  a coefficient times the simulated gas temperature through a first-order lag.
  Their estimation costs degrees of freedom and widens the intervals by the
  correlation with the model parameters, which is the honest price.
* a type-B term (JCGM 100:2008, GUM, sec. 4.3 and 5.1) for the TDC phasing,
  which a fit of a fired cycle cannot separate from the burn start: a
  labelling error of standard uncertainty u moves the parameters by ``g u``,
  ``g`` from the residual's change under a shift of the measured record,
  and ``u^2 g g^T`` joins the covariance; the t quantile takes the
  Welch-Satterthwaite degrees of freedom (GUM sec. G.4).  The default u when
  the analyser estimated the offset is a quarter of the loss angle
  (:data:`TDC_LOSS_ANGLE_REL_SD`).
"""

from .burn_table import burn_table, write_burn_table   # a submodule of the same name as the function

_EXPORTS = {
    "burn_table": "burn_table", "write_burn_table": "burn_table",
    "PointsFit": "fitting", "fit": "fitting", "fit_points": "fitting",
    "check_calibratable": "bounds", "declared_fit_parameters": "bounds", "param_bounds": "bounds",
    "MeasuredData": "measured", "measured_data": "measured",
    "FitResult": "result", "write_calibration": "result",
}
"""Public name -> the submodule that defines it, imported at the name's first use: a command that
only reads :data:`cyclesim.calibration.bounds.CALIBRATION_RULE` (the command line's help) does not
load the fitting machinery."""

__all__ = ["FitResult", "PointsFit", "fit", "fit_points", "param_bounds", "check_calibratable",
           "declared_fit_parameters", "burn_table", "write_burn_table", "measured_data", "MeasuredData", "write_calibration"]


def __getattr__(name: str):
    sub = _EXPORTS.get(name)
    if sub is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(f"{__name__}.{sub}"), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS))
