"""Constant-property ideal gas: the air-standard reference for checks and loss breakdowns.

Fresh charge and burned gas share one constant gas constant and one constant
ratio of specific heats; burning releases the fuel's lower heating value and
changes nothing else.  With this gas, an instant burn at TDC and no losses the
cycle is the air-standard Otto cycle, eta = 1 - r^(1-gamma) (Heywood 1988,
eq. 5.31).  Same interface as :class:`cyclesim.solve.gas_tables.GasTables`.
"""

from __future__ import annotations

from collections import namedtuple

import numpy as np

T_REF = 298.15

MixProps = namedtuple("MixProps", "u u_T u_lnrho u_y R R_T R_lnrho R_y cv cp gamma")


class ConstantGammaGas:
    """Properties of a batch with constant gamma [-] and gas constant R [J/(kg K)].

    Internal energies are per unit mass with the burned gas at zero enthalpy at
    298.15 K and the fresh charge higher by its chemical energy ``lhv_mix``.
    """

    def __init__(self, fuel, phi, gamma, R):
        phi = np.asarray(phi, dtype=float)
        self.B = phi.shape[0]
        ones = np.ones(self.B)
        self.phi = phi
        self.gamma_value = np.asarray(gamma, float) * ones
        self.Rc = np.asarray(R, float) * ones
        self.cv_value = self.Rc / (self.gamma_value - 1.0)
        self.cp_value = self.cv_value + self.Rc
        afr = fuel.afr_stoich / phi
        self.afr_stoich = fuel.afr_stoich * ones
        self.y_fuel = 1.0 / (1.0 + afr)
        self.lhv = fuel.lhv_J_per_kg * ones
        self.lhv_mix = self.y_fuel * self.lhv
        self.h298_b = np.zeros(self.B)
        self.h298_u = self.lhv_mix.copy()
        self.chem_b = np.zeros(self.B)
        self.chem_b_co = np.zeros(self.B)
        self.chem_b_h2 = np.zeros(self.B)
        self.burned_model = "constant_gamma"

    def _ub(self, T):
        T = np.asarray(T, float)
        cp = self.cp_value.reshape((-1,) + (1,) * (T.ndim - 1))
        R = self.Rc.reshape((-1,) + (1,) * (T.ndim - 1))
        return cp * (T - T_REF) - R * T

    def unburned(self, T):
        T = np.asarray(T, float)
        shp = (-1,) + (1,) * (T.ndim - 1)
        u = self._ub(T) + self.lhv_mix.reshape(shp)
        return u, np.broadcast_to(self.cv_value.reshape(shp), T.shape).copy(), \
            np.broadcast_to(self.Rc.reshape(shp), T.shape).copy()

    def burned(self, T, rho):
        T = np.asarray(T, float)
        shp = (-1,) + (1,) * (T.ndim - 1)
        z = np.zeros(T.shape)
        cv = np.broadcast_to(self.cv_value.reshape(shp), T.shape).copy()
        R = np.broadcast_to(self.Rc.reshape(shp), T.shape).copy()
        return self._ub(T), cv, z, R, z.copy(), z.copy()

    def mixture(self, T, rho, y):
        T = np.asarray(T, float)
        y = np.asarray(y, float)
        u = self._ub(T) + (1.0 - y) * self.lhv_mix
        z = np.zeros(T.shape)
        cv = self.cv_value * np.ones(T.shape)
        R = self.Rc * np.ones(T.shape)
        return MixProps(u, cv, z, -self.lhv_mix * np.ones(T.shape), R, z, z, z, cv,
                        self.cp_value * np.ones(T.shape), self.gamma_value * np.ones(T.shape))

    def mixture_grid(self, T, rho, y):
        """As :meth:`mixture` for (B, n) arrays (a crank grid per case)."""
        T = np.asarray(T, float)
        col = lambda a: np.broadcast_to(a[:, None], T.shape).copy()  # noqa: E731 - per case, every point
        u = self._ub(T) + (1.0 - np.asarray(y, float)) * self.lhv_mix[:, None]
        z = np.zeros(T.shape)
        cv = col(self.cv_value)
        return MixProps(u, cv, z, -col(self.lhv_mix), col(self.Rc), z, z, z, cv, col(self.cp_value),
                        col(self.gamma_value))

    def pressure(self, T, rho, y):
        return np.asarray(rho) * self.Rc * np.asarray(T)

    def enthalpy_unburned(self, T):
        u, _, R = self.unburned(T)
        return u + R * np.asarray(T)

    def enthalpy_burned(self, T, rho):
        return self._ub(T) + self.Rc * np.asarray(T)
