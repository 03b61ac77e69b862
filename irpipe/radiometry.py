"""Blackbody radiometry: Planck's law, band radiance through a spectral response, and
fast monotone inverse tables from signal to temperature.

Everything is SI: wavelength [m], temperature [K], spectral radiance
[W m-2 sr-1 m-1], band radiance [W m-2 sr-1].

References
----------
.. [1] M. Planck, "Ueber das Gesetz der Energieverteilung im Normalspectrum",
   Annalen der Physik 309(3), 553-563 (1901), doi:10.1002/andp.19013090310.
.. [2] E. Tiesinga et al., "CODATA recommended values of the fundamental physical
   constants: 2018", Rev. Mod. Phys. 93, 025010 (2021), doi:10.1103/RevModPhys.93.025010.
.. [3] M. Vollmer, K.-P. Moellmann, "Infrared Thermal Imaging: Fundamentals, Research
   and Applications", 2nd ed., Wiley-VCH (2018), ch. 1 (band radiance, Wien's law).
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq

from .constants import C1L, C2, ZERO_CELSIUS

# Root of x = 5 (1 - exp(-x)), the Wien displacement constant b = C2 / x.
# Value computed by brentq at import time (no hard-coded number).
WIEN_X = brentq(lambda x: x - 5.0 * (1.0 - np.exp(-x)), 4.0, 6.0, xtol=1e-15)
WIEN_B = C2 / WIEN_X  # [m K]


def planck_radiance(wavelength, temperature):
    """Spectral radiance of a blackbody (Planck's law).

    Parameters
    ----------
    wavelength : array_like
        Wavelength in vacuum [m].
    temperature : array_like
        Thermodynamic temperature [K]; broadcasts against ``wavelength``.

    Returns
    -------
    ndarray
        Spectral radiance L_lambda [W m-2 sr-1 m-1].

    Notes
    -----
    L_lambda = c1L lambda^-5 / (exp(c2 / (lambda T)) - 1), with c1L = 2 h c^2 and
    c2 = h c / k_B  (Eq. of [1], constants from [2]).
    """
    lam = np.asarray(wavelength, dtype=float)
    t = np.asarray(temperature, dtype=float)
    with np.errstate(over="ignore", divide="ignore"):
        return C1L / lam**5 / np.expm1(C2 / (lam * t))  # Planck [1]


def wien_peak_wavelength(temperature):
    """Wavelength of the maximum of L_lambda, lambda_max = b / T [m] (Wien's displacement law, [3])."""
    return WIEN_B / np.asarray(temperature, dtype=float)


@dataclass(frozen=True)
class SpectralResponse:
    """Relative spectral response of a camera, as quadrature nodes and weights.

    ``band_radiance(T) = sum(weights * L_lambda(wavelength, T))`` approximates
    integral R(lambda) L_lambda(lambda, T) d lambda [W m-2 sr-1].

    Attributes
    ----------
    wavelength : ndarray of shape (K,)
        Quadrature nodes [m].
    weights : ndarray of shape (K,)
        Response times trapezoid weights [m].
    description : str
        How the response was defined (for metadata and reports).
    """

    wavelength: np.ndarray
    weights: np.ndarray
    description: str = ""
    response: np.ndarray = field(default=None, repr=False)

    @classmethod
    def rectangular(cls, lo, hi, step=5e-9):
        """Ideal band: response 1 between ``lo`` and ``hi`` [m], 0 outside.

        Uses a uniform grid of at most ``step`` [m] for narrow bands and a geometric grid
        for bands spanning more than a factor 3 (e.g. 0.5-1000 um for Stefan-Boltzmann).
        """
        lo, hi = float(lo), float(hi)
        if not (0 < lo < hi):
            raise ValueError(f"spectral band must satisfy 0 < lo < hi, got [{lo}, {hi}] m")
        if hi / lo > 3.0:
            lam = np.geomspace(lo, hi, 40001)
        else:
            n = int(np.ceil((hi - lo) / step)) + 1
            lam = np.linspace(lo, hi, max(n, 257))
        resp = np.ones_like(lam)
        return cls(lam, _trapezoid_weights(lam) * resp,
                   f"rectangular {lo * 1e6:g}-{hi * 1e6:g} um", resp)

    @classmethod
    def tabulated(cls, wavelength, response, step=5e-9, description="tabulated"):
        """Response tabulated at ``wavelength`` [m], linearly interpolated onto a fine grid.

        The response is normalised to a peak of 1; only its shape matters because the
        camera calibration carries the scale.
        """
        wl = np.asarray(wavelength, dtype=float)
        r = np.asarray(response, dtype=float)
        if wl.ndim != 1 or wl.shape != r.shape or wl.size < 2:
            raise ValueError("spectral response needs two equal-length columns with at least 2 rows")
        if np.any(np.diff(wl) <= 0):
            raise ValueError("spectral response wavelengths must increase strictly")
        if np.any(~np.isfinite(r)) or np.any(r < 0) or r.max() <= 0:
            raise ValueError("spectral response values must be finite, >= 0 and not all zero")
        n = max(int(np.ceil((wl[-1] - wl[0]) / step)) + 1, 257)
        lam = np.union1d(np.linspace(wl[0], wl[-1], n), wl)
        resp = np.interp(lam, wl, r / r.max())
        return cls(lam, _trapezoid_weights(lam) * resp, description, resp)

    @property
    def band(self):
        """(lo, hi) wavelength limits of the response [m]."""
        return float(self.wavelength[0]), float(self.wavelength[-1])

    def band_radiances(self, temperature, transmittances):
        """Band radiance for several weightings at once, sharing the Planck evaluations.

        Returns an array of shape (len(transmittances),) + temperature.shape; ``None`` in
        ``transmittances`` stands for no path. ``temperature`` may be a ``PlanckTable`` of
        this response (Planck's law evaluated once for many weightings).
        """
        ws = np.stack([self.weights if tr is None else self.weights * np.asarray(tr, float)
                       for tr in transmittances], axis=1)              # (K, J)
        shape, out = self._integrate(temperature, ws)
        return np.moveaxis(out, 1, 0).reshape((ws.shape[1],) + shape)

    def band_radiance(self, temperature, transmittance=None):
        """Band radiance seen through this response [W m-2 sr-1].

        Parameters
        ----------
        temperature : array_like or PlanckTable
            Blackbody temperature [K], any shape; or a ``PlanckTable`` of this response.
        transmittance : array_like of shape (K,), optional
            Spectral transmittance of a path at ``self.wavelength`` [fraction].

        Notes
        -----
        L_band(T) = integral R(lambda) tau(lambda) L_lambda(lambda, T) d lambda, by the
        trapezoid rule on the response grid.
        """
        w = self.weights if transmittance is None else self.weights * np.asarray(transmittance, float)
        shape, out = self._integrate(temperature, w)
        return out.reshape(shape)

    def weighted_transmittance(self, transmittance, temperature):
        """Band transmittance of a spectral transmittance, weighted by a blackbody at T.

        Parameters
        ----------
        transmittance : array_like of shape (K,) or (..., K)
            Spectral transmittance at ``self.wavelength`` [fraction]; leading axes are
            several paths.
        temperature : array_like or PlanckTable
            Temperature of the source whose spectrum weights the mean [K].

        Returns
        -------
        ndarray
            tau_eff [fraction], of shape ``transmittance.shape[:-1] + temperature.shape``.

        Notes
        -----
        tau_eff(T) = integral R tau L_lambda(lambda, T) d lambda / integral R L_lambda(lambda, T) d lambda,
        both by the trapezoid rule on the response grid (``band_radiances``), Planck's law
        from [1]_.
        """
        tau = np.asarray(transmittance, dtype=float)
        rows = tau.reshape(-1, tau.shape[-1])
        l_band = self.band_radiances(temperature, [None, *rows])
        out = l_band[1:] / l_band[0]
        return out.reshape(tau.shape[:-1] + out.shape[1:])

    def planck_table(self, temperature):
        """Planck's law at this response's wavelengths for fixed temperatures, kept.

        Band integrals of the returned ``PlanckTable`` under any weighting cost one
        weighted sum each and equal, bit for bit, those computed from the temperatures.
        Its size is ``temperature.size * K * 4`` bytes (float32, see ``_planck_blocks``).
        """
        t = np.asarray(temperature, dtype=float)
        return PlanckTable(self.wavelength, t, tuple(self._planck_blocks(t.reshape(-1))))

    def _planck_blocks(self, flat):
        """(slice, L_lambda of shape (n, K), float32) over a flat temperature array, in blocks.

        The spectral radiances are rounded to float32 (relative 6e-8 each) before the
        weighted sum, which is taken in float64: band integrals over the response's K
        nodes then move by about 1e-9 relative (the roundings are independent and average
        out), about 1e-7 K in temperature, below the float32 step of the corrected
        temperatures, while a kept table (``planck_table``) takes half the memory (85
        instead of 171 MB for a 7.5-14 um band, in every process of a survey). Kept or
        not, the blocks are the same, so the numbers are too."""
        # blocks keep the (T, lambda) temporary small
        blk = max(1, 2_000_000 // self.wavelength.size)
        for s in range(0, flat.size, blk):
            yield slice(s, s + blk), planck_radiance(self.wavelength[None, :], flat[s:s + blk, None]).astype(np.float32)

    def _integrate(self, temperature, w):
        """sum_k w_k L_lambda(lambda_k, T) for each T, w of shape (K,) or (K, J): the one
        loop of the band integrals. Returns (temperature shape, values of shape (T.size,) + w.shape[1:])."""
        if isinstance(temperature, PlanckTable):
            if temperature.wavelength is not self.wavelength and \
                    not np.array_equal(temperature.wavelength, self.wavelength):
                raise ValueError("the Planck table belongs to another spectral response")
            shape, blocks = temperature.temperature.shape, temperature.blocks
            size = temperature.temperature.size
        else:
            t = np.asarray(temperature, dtype=float)
            shape, size = t.shape, t.size
            blocks = self._planck_blocks(t.reshape(-1))
        out = np.empty((size,) + w.shape[1:])
        # float32 radiances are widened SUB rows at a time into one small float64 buffer
        # that stays in cache for the product (a third faster than widening whole blocks)
        buf = np.empty((min(_SUB_ROWS, max(size, 1)), w.shape[0]))
        for sl, lt in blocks:
            o = out[sl]
            for s in range(0, lt.shape[0], buf.shape[0]):
                m = min(buf.shape[0], lt.shape[0] - s)
                np.copyto(buf[:m], lt[s:s + m])
                np.matmul(buf[:m], w, out=o[s:s + m])
        return shape, out


#: rows of the float32 Planck blocks widened to float64 at a time in band integrals
_SUB_ROWS = 64


@dataclass(frozen=True, eq=False)
class PlanckTable:
    """Spectral radiance L_lambda(lambda_k, T_i) of a response's wavelengths at fixed
    temperatures, kept in the blocks that ``SpectralResponse`` band integrals use.

    Made by ``SpectralResponse.planck_table``; pass it instead of the temperatures to
    ``band_radiance``, ``band_radiances`` or ``weighted_transmittance``.

    Attributes
    ----------
    wavelength : ndarray of shape (K,)
        The response's quadrature nodes [m].
    temperature : ndarray
        The temperatures [K].
    blocks : tuple of (slice, ndarray of shape (n, K))
        L_lambda [W m-2 sr-1 m-1] for the flat temperatures in each slice.
    """

    wavelength: np.ndarray
    temperature: np.ndarray
    blocks: tuple = field(repr=False)

    @property
    def nbytes(self):
        return sum(b.nbytes for _, b in self.blocks)


def _trapezoid_weights(x):
    w = np.zeros_like(x)
    d = np.diff(x)
    w[:-1] += d / 2
    w[1:] += d / 2
    return w


def node_temperatures(t_min, t_max, n=4096):
    """The dense sampling grid of MonotoneTable: 4n nodes uniform in 1/T, increasing T [K].

    Read-only, one array per grid: the tables of one range share it."""
    return _node_grid(float(t_min), float(t_max), int(n))


@functools.lru_cache(maxsize=16)
def _node_grid(t_min, t_max, n):
    nodes = 1.0 / np.linspace(1.0 / t_max, 1.0 / t_min, 4 * n)[::-1]
    nodes.setflags(write=False)
    return nodes


def _hermite(x, y, at):
    """Piecewise cubic Hermite interpolation of y(x) at ``at`` (x increasing), with the
    three-point (Bessel) derivative estimates: the slope at each node is that of the
    parabola through it and its neighbours (C. de Boor, A Practical Guide to Splines,
    Springer 1978, ch. IV; one-sided differences at the ends). Local, O(h^3): on the
    4n-node grids of ``MonotoneTable``, within 1e-10 K of the exact inverse of Planck's
    law over -60..650 C (``tests/test_radiometry.py``), at a tenth of the cost of a global
    cubic spline."""
    h = np.diff(x)
    d = np.diff(y) / h
    m = np.empty_like(y)
    m[1:-1] = (h[1:] * d[:-1] + h[:-1] * d[1:]) / (h[:-1] + h[1:])
    m[0], m[-1] = d[0], d[-1]
    i = np.clip(np.searchsorted(x, at, side="right") - 1, 0, x.size - 2)
    hi = h[i]
    s = (at - x[i]) / hi
    s2 = s * s
    s1 = 1.0 - s
    return (y[i] * (1.0 + 2.0 * s) * s1 * s1 + hi * m[i] * s * s1 * s1
            + y[i + 1] * s2 * (3.0 - 2.0 * s) - hi * m[i + 1] * s2 * s1)


class MonotoneTable:
    """Fast forward and inverse evaluation of a strictly increasing signal S(T) > 0.

    The forward function is sampled exactly on a dense grid uniform in 1/T. The inverse
    uses a grid uniform in y = ln S, where 1/T is almost linear in y (exactly so in the
    Wien limit of a monochromatic band), so index arithmetic plus linear interpolation
    reaches sub-millikelvin accuracy with no search.

    Parameters
    ----------
    func : callable
        Vectorised exact S(T) for T [K]; must be positive and strictly increasing.
    t_min, t_max : float
        Temperature range of the table [K].
    n : int
        Number of nodes.
    """

    def __init__(self, func, t_min, t_max, n=4096, samples=None):
        self.func = func
        self.t_min, self.t_max = float(t_min), float(t_max)
        t_nodes = node_temperatures(self.t_min, self.t_max, n)
        s = np.asarray(func(t_nodes) if samples is None else samples, dtype=float)
        if np.any(~np.isfinite(s)) or np.any(s <= 0) or np.any(np.diff(s) <= 0):
            raise ValueError("signal model is not positive and strictly increasing over "
                             f"{self.t_min - ZERO_CELSIUS:.1f} .. {self.t_max - ZERO_CELSIUS:.1f} C")
        y_nodes = np.log(s)
        self._t_nodes, self._y_nodes = t_nodes, y_nodes
        # inverse: x = 1/T as a smooth function of y, sampled on a uniform y grid
        self.y0, self.y1 = float(y_nodes[0]), float(y_nodes[-1])
        self.n = n
        self.dy = (self.y1 - self.y0) / (n - 1)
        y_grid = self.y0 + self.dy * np.arange(n)
        x_grid = _hermite(y_nodes, 1.0 / t_nodes, y_grid)
        self._x = x_grid
        self._dx = np.append(np.diff(x_grid), 0.0)
        self.s_min, self.s_max = float(s[0]), float(s[-1])
        self._x32, self._dx32 = self._x.astype(np.float32), self._dx.astype(np.float32)

    def forward(self, temperature):
        """S(T), exact (direct evaluation of ``func``)."""
        return np.asarray(self.func(np.asarray(temperature, dtype=float)), dtype=float)

    def forward_fast(self, temperature, dtype=np.float64):
        """S(T) by interpolation of ln S on the dense node grid (for per-pixel use)."""
        t = np.asarray(temperature, dtype=float)
        y = np.interp(t, self._t_nodes, self._y_nodes, left=np.nan, right=np.nan)
        return np.exp(y).astype(dtype, copy=False)

    def inverse(self, signal, dtype=np.float64):
        """T(S) [K]; NaN where S <= 0 or outside the table's range.

        Works in ``dtype`` (float32 keeps the result within a few microkelvin of float64).
        """
        s = np.asarray(signal, dtype=dtype)
        if dtype == np.float32:
            xg, dxg = self._x32, self._dx32
        else:
            xg, dxg = self._x, self._dx
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.log(s)
            t -= dtype(self.y0)
            t *= dtype(1.0 / self.dy)
        bad = ~((t >= 0) & (t <= self.n - 1))      # also catches NaN
        np.clip(t, 0, self.n - 1, out=t)
        np.nan_to_num(t, copy=False)
        i = t.astype(np.int32)
        t -= i
        x = xg[i]
        x += t * dxg[i]
        out = np.reciprocal(x, out=x)
        out[bad] = np.nan
        return out

    def inverse_exact(self, signal):
        """T(S) [K] by a float64 root finder (reference for tests; slow)."""
        s = np.atleast_1d(np.asarray(signal, dtype=float))
        out = np.full(s.shape, np.nan)
        for k, v in np.ndenumerate(s):
            if self.s_min <= v <= self.s_max:
                out[k] = brentq(lambda tt: float(self.func(np.array(tt))) - v,
                                self.t_min, self.t_max, xtol=1e-12, rtol=1e-15)
        return out
