"""An independent forward model for end-to-end tests.

It shares no code with irpipe's inversion path: its own Planck function from
scipy.constants (CODATA 2022, equal to CODATA 2018 for h, c, k_B), its own wavelength grid
(1 nm, Simpson's rule via scipy.integrate), and the measurement equation written out
spectrally: the camera receives

    int R(l) { tau(l) [eps B(l, T_obj) + (1 - eps) B(l, T_refl)] + (1 - tau(l)) B(l, T_air) } dl

(Vollmer & Moellmann, Infrared Thermal Imaging, 2nd ed. 2018, sect. 2.4, with tau spectral).
"""
from __future__ import annotations

import numpy as np
from scipy import constants as sc
from scipy.integrate import simpson

C1L = 2 * sc.h * sc.c**2
C2 = sc.h * sc.c / sc.k


def planck(lam, t):
    return C1L / lam**5 / np.expm1(C2 / (lam * t))


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
