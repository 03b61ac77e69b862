"""Linearisation of raw detector values: calibration models, non-uniformity correction,
bad-pixel replacement, and fitting of the models to blackbody reference frames.

Two calibration models map a blackbody temperature to raw counts:

* ``linear``: counts = gain * L_band(T) + offset, with L_band the band radiance of the
  camera's spectral response [W m-2 sr-1].
* ``sakuma-hattori``: counts = C / (exp(c2 / (A T + B)) - 1) + offset, the Planck form of
  the Sakuma-Hattori interpolation equation [1]_, [2]_.

In both, counts minus offset is proportional to the in-band radiance, so the radiometric
measurement equation can be written in signal units (``correction``).

References
----------
.. [1] F. Sakuma, S. Hattori, "Establishing a practical temperature standard by using a
   narrow-band radiation thermometer with a silicon detector", in Temperature: Its
   Measurement and Control in Science and Industry, vol. 5, AIP (1982), 421-427.
   (Citation given from memory.)
.. [2] CCT-WG5 (J. Fischer, P. Saunders, M. Sadli et al.), "Uncertainty budgets for
   calibration of radiation thermometers below the silver point", CCT-WG5 document,
   v1.71 (2008); P. Saunders, D. R. White, "Physical basis of interpolation equations for
   radiation thermometry", Metrologia 40, 195-203 (2003) (citation from memory).
"""
from __future__ import annotations

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares

from .constants import C2


# --- Sakuma-Hattori (Planck form) --------------------------------------------------

def sakuma_hattori_signal(temperature, a, b, c):
    """Sakuma-Hattori signal S(T) = C / (exp(c2 / (A T + B)) - 1).

    Parameters
    ----------
    temperature : array_like
        Blackbody temperature [K].
    a : float
        Effective-wavelength coefficient A [m].
    b : float
        Bandwidth coefficient B [m K].
    c : float
        Signal scale C [signal units, e.g. counts].

    Returns
    -------
    ndarray
        Signal [same unit as ``c``].

    Notes
    -----
    Planck form of the Sakuma-Hattori equation ([1]_, [2]_); lambda_x = A + B/T is the
    mean effective wavelength.
    """
    t = np.asarray(temperature, dtype=float)
    with np.errstate(over="ignore"):
        return c / np.expm1(C2 / (a * t + b))  # S-H, Planck form [2]


def sakuma_hattori_temperature(signal, a, b, c):
    """Closed-form inverse of the Sakuma-Hattori equation.

    T = c2 / (A ln(C / S + 1)) - B / A  [K]; NaN where S <= 0.
    """
    s = np.asarray(signal, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = C2 / (a * np.log1p(c / s)) - b / a  # inverse of S-H [2]
    return np.where(s > 0, t, np.nan)


def sakuma_hattori_derivative(temperature, a, b, c):
    """dS/dT of the Sakuma-Hattori equation [signal units K-1].

    dS/dT = S^2 A c2 exp(c2/(AT+B)) / (C (AT+B)^2)   ([2]_).
    """
    t = np.asarray(temperature, dtype=float)
    s = sakuma_hattori_signal(t, a, b, c)
    u = a * t + b
    return s**2 * a * C2 * np.exp(C2 / u) / (c * u**2)


def fit_sakuma_hattori(temperature, signal, a0=10e-6, b0=50e-6):
    """Least-squares fit of (A, B, C) to signal-versus-temperature pairs.

    Parameters
    ----------
    temperature : array_like of shape (K,)
        Reference temperatures [K] (at least 3).
    signal : array_like of shape (K,)
        Offset-free signal at those temperatures.

    Returns
    -------
    (a, b, c) : tuple of float
        A [m], B [m K], C [signal units].

    Notes
    -----
    Residuals are taken in temperature (the quantity that matters to the user), so the
    fit weights every reference point equally in kelvin. Scaling: A in um, B in um K.
    """
    t = np.asarray(temperature, float)
    s = np.asarray(signal, float)
    if t.size < 3:
        raise ValueError("a Sakuma-Hattori fit needs at least 3 reference temperatures")
    if np.any(s <= 0):
        raise ValueError("offset-free signal must be positive at every reference point")
    # starting C from the first point with the start A, B
    c0 = float(s[-1] * np.expm1(C2 / (a0 * t[-1] + b0)))

    def resid(p):
        a, b, lc = p[0] * 1e-6, p[1] * 1e-6, p[2]
        return sakuma_hattori_temperature(s, a, b, np.exp(lc)) - t

    sol = least_squares(resid, [a0 * 1e6, b0 * 1e6, np.log(c0)], method="lm", xtol=1e-15, ftol=1e-15)
    return sol.x[0] * 1e-6, sol.x[1] * 1e-6, float(np.exp(sol.x[2]))


def fit_linear(band_radiance, counts):
    """Least-squares fit of counts = gain * L_band + offset.

    Returns (gain [counts per W m-2 sr-1], offset [counts]).
    """
    l = np.asarray(band_radiance, float)
    k = np.asarray(counts, float)
    if l.size < 2:
        raise ValueError("a linear fit needs at least 2 reference temperatures")
    gain, offset = np.polyfit(l, k, 1)
    return float(gain), float(offset)


# --- non-uniformity correction and bad pixels --------------------------------------

def two_point_nuc(frame_low, frame_high, target_low=None, target_high=None):
    """Per-pixel gain and offset maps from two uniform reference scenes.

    Parameters
    ----------
    frame_low, frame_high : ndarray of shape (M, N)
        Mean raw frames of a uniform source at two temperatures.
    target_low, target_high : float, optional
        Counts the array should read at the two references; default the spatial median
        of each frame (so the maps only equalise the pixels).

    Returns
    -------
    gain, offset : ndarray of shape (M, N)
        Corrected counts = gain * raw + offset.

    Notes
    -----
    Two-point non-uniformity correction, e.g. D. A. Scribner et al., "Nonuniformity
    correction for staring IR focal plane arrays using scene-based techniques",
    Proc. SPIE 1308 (1990) (the two-point method is common practice).
    """
    lo = np.asarray(frame_low, float)
    hi = np.asarray(frame_high, float)
    tl = np.nanmedian(lo) if target_low is None else float(target_low)
    th = np.nanmedian(hi) if target_high is None else float(target_high)
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = (th - tl) / (hi - lo)
    offset = tl - gain * lo
    return gain, offset


class BadPixelFiller:
    """Replace flagged pixels by the mean of their valid neighbours.

    Neighbours are taken in growing square rings (3x3, 5x5, ...) until at least one valid
    pixel is found, so clusters of bad pixels are filled too. The neighbour lists are
    built once per mask; filling a frame is a vectorised gather.

    Parameters
    ----------
    mask : ndarray of bool, shape (M, N)
        True where a pixel is bad.
    """

    def __init__(self, mask, max_radius=8):
        mask = np.asarray(mask, bool)
        self.shape = mask.shape
        self.count = int(mask.sum())
        if self.count == 0:
            self.targets = np.empty(0, np.intp)
            return
        if self.count == mask.size:
            raise ValueError("bad-pixel mask flags every pixel")
        targets, sources = [], []
        remaining = mask.copy()
        valid = ~mask
        for r in range(1, max_radius + 1):
            if not remaining.any():
                break
            k = np.ones((2 * r + 1, 2 * r + 1))
            nvalid = ndimage.convolve(valid.astype(float), k, mode="constant")
            ready = remaining & (nvalid > 0.5)
            rr, cc = np.nonzero(ready)
            for dr in range(-r, r + 1):
                for dc in range(-r, r + 1):
                    r2, c2 = rr + dr, cc + dc
                    ok = (r2 >= 0) & (r2 < mask.shape[0]) & (c2 >= 0) & (c2 < mask.shape[1])
                    ok[ok] &= valid[r2[ok], c2[ok]]
                    t = np.ravel_multi_index((rr[ok], cc[ok]), mask.shape)
                    s = np.ravel_multi_index((r2[ok], c2[ok]), mask.shape)
                    targets.append(t)
                    sources.append(s)
            remaining &= ~ready
        if remaining.any():
            raise ValueError(f"bad-pixel clusters wider than {2 * max_radius + 1} px cannot be filled")
        self.targets_all = np.concatenate(targets)
        self.sources = np.concatenate(sources)
        self.targets, inv = np.unique(self.targets_all, return_inverse=True)
        self._inv = inv
        self._n = np.bincount(inv, minlength=self.targets.size).astype(float)

    def fill(self, frames):
        """Return ``frames`` (F, M, N) with bad pixels replaced (in place when possible)."""
        if self.count == 0:
            return frames
        f = frames.reshape(frames.shape[0], -1)
        vals = f[:, self.sources].astype(float)
        sums = np.zeros((f.shape[0], self.targets.size))
        for j in range(f.shape[0]):
            sums[j] = np.bincount(self._inv, weights=vals[j], minlength=self.targets.size)
        mean = sums / self._n
        if np.issubdtype(f.dtype, np.integer):
            mean = np.rint(mean)
        f[:, self.targets] = mean.astype(f.dtype)
        return frames
