"""Per-pixel emissivity: material library, label maps, and the oblique-view model.

A pixel's emissivity is given as one number, a float map, or a label image whose labels
map to numbers or to names in the material library (``data/materials.yaml``, each entry
with its source). Label images are kept as (index image, table of values), so the
radiometric stage can build one inverse table per distinct emissivity.

References
----------
.. [1] M. Born, E. Wolf, "Principles of Optics", 7th ed., Cambridge University Press
   (1999), sect. 1.5 (Fresnel equations).
.. [2] ASTM E1933-14 (2022), "Standard Practice for Measuring and Compensating for
   Emissivity Using Infrared Imaging Radiometers".
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class EmissivityField:
    """Emissivity of a stack's pixels.

    Exactly one form is set: ``value`` (scalar), ``values`` + ``index`` (label form:
    emissivity = values[index]), or ``map`` (float array (M, N)).
    """

    value: float | None = None
    index: np.ndarray | None = None
    values: np.ndarray | None = None
    map: np.ndarray | None = None
    description: str = ""
    uncertainty: np.ndarray | float | None = None   # standard uncertainty per pixel, from the library

    def as_array(self, shape):
        if self.value is not None:
            return np.full(shape, self.value, np.float32)
        if self.map is not None:
            return self.map.astype(np.float32)
        return self.values.astype(np.float32)[self.index]

    def distinct(self):
        """Number of distinct emissivity values (1 for a scalar, None for a free map)."""
        if self.value is not None:
            return 1
        if self.values is not None:
            return len(self.values)
        return None

    def scaled(self, factor):
        """Emissivity times ``factor`` (scalar or (M, N)), e.g. for an oblique view."""
        f = np.asarray(factor, float)
        if f.ndim == 0:
            if self.value is not None:
                return EmissivityField(value=float(self.value * f), description=self.description)
            if self.values is not None:
                return EmissivityField(index=self.index, values=self.values * f, description=self.description)
            return EmissivityField(map=self.map * f, description=self.description)
        return EmissivityField(map=self.as_array(f.shape) * f, description=self.description)


def material_emissivity(name, library):
    """Emissivity of a named material; raises KeyError listing close names."""
    if name not in library:
        import difflib
        close = difflib.get_close_matches(name, list(library), n=3)
        raise KeyError(f"material '{name}' is not in the library"
                       + (f"; did you mean {', '.join(repr(c) for c in close)}?" if close else "")
                       + f" (known: {len(library)} materials; add it with materials: my_library.yaml)")
    return float(library[name]["emissivity"])


def fresnel_emissivity(angle, n, k=0.0):
    """Directional emissivity of a smooth, opaque surface from the Fresnel equations.

    Parameters
    ----------
    angle : array_like
        Viewing angle from the surface normal [rad].
    n, k : float
        Real and imaginary parts of the complex refractive index.

    Returns
    -------
    ndarray
        eps(theta) = 1 - (|r_s|^2 + |r_p|^2) / 2  (Kirchhoff, with Fresnel reflectances [1]_).

    Notes
    -----
    Valid for non-metals (dielectrics); metals are not modelled here, because their
    emissivity rises toward grazing views and depends on the surface state more than on
    any tabulated optical constant.
    """
    th = np.asarray(angle, float)
    m = complex(n, k)
    cos_i = np.cos(th)
    sin_i = np.sin(th)
    cos_t = np.sqrt(1 - (sin_i / m) ** 2 + 0j)
    rs = (cos_i - m * cos_t) / (cos_i + m * cos_t)          # Fresnel s [1]
    rp = (m * cos_i - cos_t) / (m * cos_i + cos_t)          # Fresnel p [1]
    return 1.0 - 0.5 * (np.abs(rs) ** 2 + np.abs(rp) ** 2)


def oblique_factor(angle_deg, refractive_index=1.5):
    """Ratio eps(theta)/eps(0) for a dielectric of the given refractive index.

    Applied to a near-normal emissivity from a table. The default n = 1.5 is a typical
    value for glass, paint and masonry binders in the 8-14 um band (given from memory).
    """
    th = np.deg2rad(np.asarray(angle_deg, float))
    return fresnel_emissivity(th, refractive_index) / fresnel_emissivity(0.0, refractive_index)
