"""0-D in-cylinder turbulence and the turbulent flame's scales, as plain functions.

**K-k model** (Poulos & Heywood 1983, SAE 830334).  Two energies per unit mass of the
cylinder charge: K, the kinetic energy of the mean (bulk) flow set up by the intake jet, and
k = (3/2) u'^2, that of the turbulence.  While the valves are shut

    dK/dt = -P
    dk/dt =  P - eps + (2/3) k (1/rho) drho/dt
    P     = 0.3307 c_beta K sqrt(k) / L,   eps = u'^3 / L,

P the cascade of mean-flow energy into turbulence, eps its dissipation, L the integral length
scale, taken as the instantaneous chamber height V / (pi B^2 / 4) but no more than half the bore.
The production form and the 0.3307 factor (= (2/3)^(3/2) x 0.5443, from the turbulence's own
velocity) are as Poulos & Heywood wrote them (from memory).  The last term is the rapid-distortion
amplification of isotropic turbulence by compression, u' ~ rho^(1/3) (Wong & Hoult 1979, from
memory), which the K-k model's authors included through the density change (from memory).

Why K-k: it carries the bulk flow's energy through compression and releases it as turbulence
near TDC, which is what makes u' at TDC scale with the mean piston speed (about 0.5 S_p,
Heywood 1988 section 8.4, from memory) whatever the intake state; a k-only decay would forget
the intake flow long before TDC, a k-eps model would add a state and a constant set for little
gain in a 0-D chamber.

**Flame scales** (Tabaczynski, Ferguson & Radhakrishnan 1977): the Taylor microscale from the
isotropic-turbulence identity eps = 15 nu u'^2 / lambda^2 (Tennekes & Lumley 1972, eq. 3.2.14,
from memory) with eps = u'^3 / L, so lambda = L sqrt(15 / Re_L), Re_L = u' L / nu.

**Early flame kernel** (Herweg & Maly 1992, SAE 922243): a kernel smaller than the integral scale
is wrinkled only by the eddies smaller than itself, and only after they have had an eddy
turnover time to act on it; the effective turbulence intensity is

    u'_eff = u' sqrt(1 - exp(-r_f / L_I)) sqrt(1 - exp(-t / tau_L)),   tau_L = L_I / u',

t the time since the spark, r_f the flame radius (form from memory), L_I the integral scale of the
turbulence: about 0.2 of the chamber height near TDC (measurements reviewed by Heywood 1988,
section 8.2, from memory), so L_I = 0.2 L here.  The kernel's laminar burning velocity is
stretched (Herweg & Maly 1992, form from memory) by the factor

    I_0 = 1 - sqrt(l_F / (15 L_I)) (u'_eff / S_L)^(3/2) - 2 (l_F / r_f) (rho_u / rho_b),   l_F = nu / S_L,

strain by the turbulence the kernel feels and curvature of the kernel, the latter the Karlovitz
number of an expanding sphere, whose front moves at (rho_u / rho_b) S_L; thick flames (low
density, much burned-gas dilution) are slowed the most.  The Taylor microscale, by contrast, follows from
the K-k model's own dissipation eps = u'^3 / L, so it uses L.

**Flame brush** (Taylor 1921, Proc. London Math. Soc. s2-20, 196-212: dispersion by continuous
movements): the wrinkled front is displaced from its mean position by the eddies as fluid
particles are, so its displacement has the variance

    sigma^2 = 2 u'^2 tau_L^2 (t / tau_L - 1 + exp(-t / tau_L)),   tau_L = L_I / u',

for an exponential Lagrangian autocorrelation exp(-s / tau_L) (the exponential form and the
time scale L_I / u' are common practice); sigma grows as u' t at first and as
sqrt(2 u'^2 tau_L t) once t >> tau_L.  That the turbulent premixed flame brush thickens by
turbulent diffusion in this way is the reading of Lipatnikov & Chomiak (2002), Prog. Energy
Combust. Sci. 28, 1-74 (from memory).

All functions take floats or numpy arrays (broadcast together), SI units, are branch-free and
compile with numba as they are.
"""

from __future__ import annotations

import numpy as np

PH_PRODUCTION_FACTOR = 0.3307
"""Poulos & Heywood (1983): the numerical factor of the production term P (from memory)."""

INTEGRAL_SCALE_RATIO = 0.2
"""Integral length scale of the turbulence / chamber height near TDC (Heywood 1988 sec. 8.2,
from memory): the eddy size that wrinkles the early kernel (Herweg & Maly)."""

TAYLOR_CONSTANT = 15.0
"""eps = 15 nu u'^2 / lambda^2 for isotropic turbulence (Tennekes & Lumley 1972, from memory)."""

SUTHERLAND_MU0 = 1.716e-5
SUTHERLAND_T0 = 273.15
SUTHERLAND_S = 110.4
"""Sutherland's law for air: mu0 [Pa s] at T0 [K], constant S [K] (White 2006, Viscous Fluid
Flow, table 1-2, from memory); used for the unburned charge, common practice."""


def integral_length(V, bore_area, half_bore):
    """Integral length scale L [m]: chamber height V / A_bore [m], at most half the bore."""
    return np.minimum(V / bore_area, half_bore)


def turbulence_intensity(k):
    """u' [m/s] from the specific turbulent kinetic energy k = (3/2) u'^2 [J/kg]."""
    return np.sqrt(np.maximum(k, 0.0) / 1.5)


def kk_rates(K, k, L, dlnrho_dt, c_beta):
    """Time derivatives (dK/dt, dk/dt) [W/kg] of the K-k model (Poulos & Heywood 1983), valves shut.

    Parameters
    ----------
    K, k : numeric
        Specific kinetic energies of the mean flow and of the turbulence [J/kg].
    L : numeric
        Integral length scale [m].
    dlnrho_dt : numeric
        Rate of change of the charge's log density [1/s].
    c_beta : numeric
        Production coefficient [-].
    """
    Kp = np.maximum(K, 0.0)
    kp = np.maximum(k, 0.0)
    u = np.sqrt(kp / 1.5)
    prod = PH_PRODUCTION_FACTOR * c_beta * Kp * np.sqrt(kp) / L
    eps = u * u * u / L
    return -prod, prod - eps + (2.0 / 3.0) * kp * dlnrho_dt


def viscosity_air(T):
    """Dynamic viscosity [Pa s] by Sutherland's law for air at T [K]."""
    return SUTHERLAND_MU0 * (T / SUTHERLAND_T0) ** 1.5 * (SUTHERLAND_T0 + SUTHERLAND_S) / (T + SUTHERLAND_S)


def taylor_microscale(u, L, nu):
    """Taylor microscale lambda = L sqrt(15 / Re_L) [m], Re_L = u' L / nu; u' [m/s], L [m], nu [m^2/s]."""
    re = np.maximum(u * L / nu, 1e-6)
    return L * np.sqrt(TAYLOR_CONSTANT / re)


def stretch_factor(s_l, u, L, nu, r_f, expansion):
    """Herweg & Maly (1992) stretch factor I_0 [-] of the laminar burning velocity in a kernel of radius
    r_f [m]: I_0 = 1 - sqrt(l_F / (15 L)) (u' / S_L)^(3/2) - 2 (l_F / r_f) (rho_u / rho_b), floored at 0.

    The first term is the strain of the turbulence (intensity u [m/s], integral scale L [m]), the
    second the curvature of the kernel: the Karlovitz number of an outward-propagating sphere, whose
    stretch rate (1/A) dA/dt = (2 / r_f) dr_f/dt with dr_f/dt = (rho_u / rho_b) S_L, the front's speed
    in the burned gas it leaves behind (Law 2006, Combustion Physics, sec. 10.2, from memory);
    l_F = nu / S_L the laminar flame thickness, nu [m^2/s] the unburned gas's kinematic viscosity,
    s_l [m/s] the unstretched laminar burning velocity, ``expansion`` = rho_u / rho_b [-] the
    density ratio across the flame."""
    l_f = nu / np.maximum(s_l, 1e-6)
    u_s = np.maximum(u, 0.0) / np.maximum(s_l, 1e-6)
    strain = np.sqrt(l_f / (15.0 * L)) * u_s * np.sqrt(u_s)
    return np.maximum(1.0 - strain - 2.0 * l_f * expansion / np.maximum(r_f, 1e-9), 0.0)


def brush_displacement(u, t, L):
    """RMS displacement sigma [m] of the flame front from its mean position, t [s] after the
    spark, by turbulence of intensity u [m/s] and integral scale L [m] (Taylor 1921 with the
    exponential Lagrangian correlation, tau_L = L / u').  x - 1 + exp(-x) is taken as
    x + expm1(-x), whose rounding error relative to its value x^2 / 2 is about 4e-16 / x."""
    tau = L / np.maximum(u, 1e-6)
    x = np.maximum(t, 0.0) / tau
    return u * tau * np.sqrt(np.maximum(2.0 * (x + np.expm1(-x)), 0.0))


def kernel_turbulence_factor(r_f, t, L, u):
    """Herweg & Maly (1992) factor u'_eff / u' [-] of a kernel of radius r_f [m], t [s] after the spark,
    in turbulence of integral scale L [m] and intensity u [m/s]."""
    tau = L / np.maximum(u, 1e-6)
    return np.sqrt((1.0 - np.exp(-r_f / L)) * (1.0 - np.exp(-np.maximum(t, 0.0) / tau)))
