"""An independent forward model for end-to-end tests.

It shares no code with irpipe's inversion path: its own Planck function from
scipy.constants (CODATA 2022, equal to CODATA 2018 for h, c, k_B), its own wavelength grid
(1 nm, Simpson's rule via scipy.integrate), and the measurement equation written out
spectrally: the camera receives

    int R(l) { tau(l) [eps B(l, T_obj) + (1 - eps) B(l, T_refl)] + (1 - tau(l)) B(l, T_air) } dl

(Vollmer & Moellmann, Infrared Thermal Imaging, 2nd ed. 2018, sect. 2.4, with tau spectral).

Also written out here, for scenes that need them: the Sakuma-Hattori signal (Planck form,
docs/references.md §2) and the Fresnel directional emissivity of a dielectric in the
sine/tangent form of Born & Wolf (docs/references.md §8 gives check values).
"""
from __future__ import annotations

import numpy as np
from scipy import constants as sc
from scipy.integrate import simpson

C1L = 2 * sc.h * sc.c**2
C2 = sc.h * sc.c / sc.k


def planck(lam, t):
    return C1L / lam**5 / np.expm1(C2 / (lam * t))


def sakuma_hattori(t, a, b, c):
    """Sakuma-Hattori signal S(T) = C / (exp(c2 / (A T + B)) - 1) [units of C], with A [m],
    B [m K], T [K] (Sakuma & Hattori 1982, Planck form; docs/references.md §2)."""
    return c / np.expm1(C2 / (a * np.asarray(t, float) + b))


def fresnel_dielectric_emissivity(angle_deg, n=1.5):
    """Directional emissivity 1 - (R_s + R_p) / 2 of a smooth, non-absorbing dielectric of
    refractive index n, from the Fresnel amplitude ratios in the form of Born & Wolf,
    Principles of Optics, sect. 1.5.2 (from memory):

        r_s = -sin(i - t) / sin(i + t),   r_p = tan(i - t) / tan(i + t),   sin t = sin i / n

    with the normal-incidence limit r = (n - 1) / (n + 1) at i = 0."""
    i = np.deg2rad(np.asarray(angle_deg, float))
    t = np.arcsin(np.sin(i) / n)
    with np.errstate(invalid="ignore", divide="ignore"):
        rs = -np.sin(i - t) / np.sin(i + t)
        rp = np.tan(i - t) / np.tan(i + t)
    r0 = (n - 1) / (n + 1)
    rs = np.where(i == 0, -r0, rs)
    rp = np.where(i == 0, r0, rp)
    return 1.0 - 0.5 * (rs ** 2 + rp ** 2)


def fresnel_dielectric_ratio(angle_deg, n=1.5):
    """eps(angle) / eps(0) of the dielectric above."""
    return fresnel_dielectric_emissivity(angle_deg, n) / fresnel_dielectric_emissivity(0.0, n)


class Camera:
    """Rectangular band [lo, hi] um on a 1 nm grid."""

    def __init__(self, lo_um=7.5, hi_um=14.0, response=None):
        n = int(round((hi_um - lo_um) * 1000)) + 1
        self.lam = np.linspace(lo_um, hi_um, n) * 1e-6
        # optional relative response: (wavelength_um, response) table, linear interpolation
        self.resp = np.ones_like(self.lam) if response is None else np.interp(self.lam * 1e6, *response)

    def band(self, t, tau=None):
        t = np.asarray(t, float)
        w = self.resp if tau is None else tau * self.resp
        flat = t.reshape(-1, 1)
        return simpson(planck(self.lam[None], flat) * w[None], x=self.lam, axis=1).reshape(t.shape)

    def received(self, t_obj, eps, t_refl, t_air, tau=None):
        """Band radiance received [W m-2 sr-1] for arrays of object temperature [K] (any shape)."""
        t_obj = np.asarray(t_obj, float)
        eps = np.broadcast_to(np.asarray(eps, float), t_obj.shape)
        tau = np.ones_like(self.lam) if tau is None else np.asarray(tau, float)
        uniq, inv = np.unique(np.round(t_obj, 6), return_inverse=True)
        l_obj_tau = self.band(uniq, tau)[inv].reshape(t_obj.shape)
        l_refl_tau = float(self.band(t_refl, tau))
        path = float(self.band(t_air, 1 - tau))
        return eps * l_obj_tau + (1 - eps) * l_refl_tau + path

    def apparent(self, radiance):
        """Blackbody temperature [K] giving this band radiance (dense-table interpolation,
        0.1 K nodes: error below 0.1 mK)."""
        r = np.asarray(radiance, float)
        grid = np.linspace(150.0, 1000.0, 8501)
        lg = self.band(grid)
        return np.interp(r, lg, grid)
