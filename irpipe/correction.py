"""The radiometric measurement equation, solved per pixel for the object temperature.

For an opaque, grey, diffuse surface (reflectance 1 - emissivity, Kirchhoff's law) seen
through a path of spectral transmittance tau(lambda), the camera's signal is

    S_meas = eps * G(T_obj) + (1 - eps) * G(T_refl) + [S(T_air) - G(T_air)]

with S(T) the camera signal of a blackbody at T (linear in in-band radiance) and
G(T) = S(T) * tau_eff(T), where tau_eff(T) = int R tau L_T / int R L_T is the band
transmittance weighted by the spectrum of a source at T. With a spectrally flat
tau this is the textbook form S_meas = tau[eps S(T_obj) + (1-eps) S(T_refl)] + (1-tau) S(T_air)
([1]_ Sect. 2.4, [2]_ ch. 3). Keeping tau spectral is exact for a grey surface and
avoids the 0.1-0.3 K bias of a single band-mean tau over tens of metres.

The solution is G(T_obj) = [S_meas - (1-eps) G(T_refl) - S(T_air) + G(T_air)] / eps,
inverted through a monotone table of G.

References
----------
.. [1] M. Vollmer, K.-P. Moellmann, "Infrared Thermal Imaging", 2nd ed., Wiley-VCH (2018).
.. [2] W. Minkina, S. Dudzik, "Infrared Thermography: Errors and Uncertainties",
   Wiley (2009), doi:10.1002/9780470682234.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .calibration import sakuma_hattori_signal
from .modeltables import measurement_tables
from .radiometry import SpectralResponse

# reason codes for invalid pixels (uint8), shared by stages and reports
VALID, SATURATED, OUT_OF_RANGE, NON_PHYSICAL, INVALID_INPUT = 0, 1, 2, 3, 4
REASONS = {SATURATED: "saturated", OUT_OF_RANGE: "outside_calibration_range",
           NON_PHYSICAL: "non_physical_radiance", INVALID_INPUT: "invalid_input"}


@dataclass(frozen=True)
class CameraModel:
    """Signal of the camera as a function of blackbody temperature.

    Attributes
    ----------
    response : SpectralResponse
        Relative spectral response (band or tabulated).
    kind : str
        ``"band"``: the signal is the band radiance [W m-2 sr-1] (linear calibration and
        apparent-temperature input); ``"sakuma-hattori"``: S(T) in counts.
    sh : tuple
        (A [m], B [m K], C [counts]) for ``"sakuma-hattori"``.
    """

    response: SpectralResponse
    kind: str = "band"
    sh: tuple = ()

    def signal(self, temperature):
        """Offset-free signal S(T) of a blackbody at ``temperature`` [K]."""
        if self.kind == "sakuma-hattori":
            return sakuma_hattori_signal(temperature, *self.sh)
        return self.response.band_radiance(temperature)


class MeasurementModel:
    """The measurement equation for one camera and one atmospheric path.

    Parameters
    ----------
    camera : CameraModel
    transmittance : float or ndarray of shape (K,)
        Path transmittance: a flat value, or spectral values at
        ``camera.response.wavelength``.
    t_range : (float, float)
        Temperature range of the inverse tables [K].
    coarse_path : bool
        Build the path table from the band transmittance on coarse nodes
        (``irpipe.modeltables.measurement_tables``: within 3e-8 relative, about 1e-6 K,
        at a sixteenth of the cost). False integrates on every node (the reference of
        the tests).
    """

    def __init__(self, camera: CameraModel, transmittance=1.0, t_range=(213.15, 923.15), coarse_path=True):
        self.camera = camera
        tau = np.asarray(transmittance, dtype=float)
        self.flat = tau.ndim == 0
        self.tau = tau
        self.t_range = (float(t_range[0]), float(t_range[1]))
        # one Planck evaluation on the table nodes per response serves every path, and
        # equal conditions share their tables (irpipe.modeltables)
        self.signal_table, self.path_table = measurement_tables(camera, self.tau, self.t_range, self.path_signal,
                                                                coarse=coarse_path)
        self._terms = {}      # exact background terms of scalar temperatures (``background``)

    def effective_transmittance(self, temperature):
        """tau_eff(T): band transmittance weighted by a blackbody at T [fraction]."""
        t = np.asarray(temperature, dtype=float)
        if self.flat:
            return np.broadcast_to(self.tau, t.shape).astype(float)
        return self.camera.response.weighted_transmittance(self.tau, t)

    def path_signal(self, temperature):
        """G(T) = S(T) tau_eff(T): signal of a blackbody at T after the path."""
        return self.camera.signal(temperature) * self.effective_transmittance(temperature)

    def received_signal(self, object_temperature, emissivity, reflected_temperature, air_temperature):
        """Forward model: the signal the camera receives (exact, float64)."""
        eps = np.asarray(emissivity, float)
        g_air = self.path_signal(air_temperature)
        return (eps * self.path_signal(object_temperature)
                + (1 - eps) * self.path_signal(reflected_temperature)
                + self.camera.signal(air_temperature) - g_air)

    def background(self, emissivity, reflected_temperature, air_temperature, fast=False):
        """(reflected term G(T_refl), path emission S(T_air) - G(T_air)) as float64 scalars/arrays.

        ``fast=True`` reads G and S from the dense forward tables (``forward_fast``,
        relative error ~1e-8) instead of one band integral per value: for many
        temperatures at once, e.g. Monte Carlo trials.
        """
        if fast:
            g_refl = self.path_table.forward_fast(reflected_temperature)
            path = self.signal_table.forward_fast(air_temperature) - self.path_table.forward_fast(air_temperature)
            return g_refl, path
        scalar = np.ndim(reflected_temperature) == 0 and np.ndim(air_temperature) == 0
        if scalar:
            # the uncertainty propagation solves many chunks with the same few (T_refl,
            # T_air): each pair's band integrals are evaluated once per model
            key = (float(reflected_temperature), float(air_temperature))
            hit = self._terms.get(key)
            if hit is not None:
                return hit
        g_refl = self.path_signal(reflected_temperature)
        path = self.camera.signal(air_temperature) - self.path_signal(air_temperature)
        if scalar and len(self._terms) < 256:
            self._terms[key] = (g_refl, path)
        return g_refl, path

    def object_temperature(self, signal, emissivity, reflected_temperature, air_temperature,
                           dtype=np.float64, fast=False):
        """Solve the measurement equation per pixel.

        Parameters
        ----------
        signal : ndarray
            Offset-free received signal (camera units).
        emissivity : float or ndarray broadcasting with ``signal``
        reflected_temperature, air_temperature : float or ndarray [K]
            Scalars, or arrays broadcasting with ``signal`` (e.g. shape (F, 1, 1) per frame).
        dtype : numpy float type
            Working precision of the per-pixel arithmetic.
        fast : bool
            Background terms from the forward tables (see ``background``): for
            reflected and air temperatures that vary per pixel or per trial.

        Returns
        -------
        temperature : ndarray [K]; NaN where no physical solution exists.
        """
        g_refl, path = self.background(emissivity, reflected_temperature, air_temperature, fast=fast)
        eps = np.asarray(emissivity, dtype=dtype)
        num = np.asarray(signal, dtype=dtype) - np.asarray(path, dtype=dtype)
        num -= (1 - eps) * np.asarray(g_refl, dtype=dtype)
        num /= eps
        return self.path_table.inverse(num, dtype=dtype)

    def apparent_temperature(self, signal, dtype=np.float64):
        """Blackbody-equivalent temperature of a signal (eps = 1, no path) [K]."""
        return self.signal_table.inverse(signal, dtype=dtype)

    def describe(self):
        """Band transmittance for a 300 K source, for reports."""
        return float(self.effective_transmittance(300.0))
