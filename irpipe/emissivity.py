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

from .defaults import REFRACTIVE_INDEX


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
        """Emissivity times ``factor`` (scalar or (M, N)), e.g. for an oblique view.

        The standard uncertainty, when known, is scaled by the same factor.
        """
        f = np.asarray(factor, float)
        u = None if self.uncertainty is None else np.asarray(self.uncertainty, float) * f
        if u is not None and u.ndim == 0:
            u = float(u)
        if f.ndim == 0:
            if self.value is not None:
                return EmissivityField(value=float(self.value * f), description=self.description, uncertainty=u)
            if self.values is not None:
                return EmissivityField(index=self.index, values=self.values * f, description=self.description,
                                       uncertainty=u)
            return EmissivityField(map=self.map * f, description=self.description, uncertainty=u)
        return EmissivityField(map=self.as_array(f.shape) * f, description=self.description, uncertainty=u)

    def uncertainty_array(self, shape):
        """Standard uncertainty per pixel as an (M, N) float64 array (0 where unknown)."""
        if self.uncertainty is None:
            return np.zeros(shape)
        return np.broadcast_to(np.asarray(self.uncertainty, float), shape).astype(float)

    def with_view_angles(self, zone, factors, metal_below=None):
        """Emissivity with a viewing-angle factor per zone of pixels.

        Parameters
        ----------
        zone : ndarray of int, shape (M, N)
            Zone number of each pixel, 0 .. len(factors) - 1.
        factors : array_like of shape (Z,)
            eps(theta)/eps(0) of each zone (1 for a zone seen normally).
        metal_below : float, optional
            Pixels whose emissivity is below this keep factor 1 (metals: not modelled).

        Returns
        -------
        EmissivityField
            In label form when the field was a number or labels (one label per
            (material, zone) pair present), so the lookup plan still applies; a map
            when it was a map.
        """
        zone = np.asarray(zone, np.int64)
        f = np.asarray(factors, float)
        nz = f.size
        shape = zone.shape
        u = self.uncertainty_array(shape)
        if self.map is not None:
            m = self.map.astype(float)
            fz = f[zone]
            if metal_below is not None:
                fz = np.where(m < metal_below, 1.0, fz)
            return EmissivityField(map=m * fz, description=self.description, uncertainty=u * fz)
        if self.value is not None:
            base_index, base_values = np.zeros(shape, np.int64), np.array([self.value], float)
        else:
            base_index, base_values = self.index.astype(np.int64), np.asarray(self.values, float)
        combo = base_index * nz + zone
        present, inv = np.unique(combo, return_inverse=True)
        mat, zz = present // nz, present % nz
        fac = f[zz]
        if metal_below is not None:
            fac = np.where(base_values[mat] < metal_below, 1.0, fac)
        index = inv.reshape(shape).astype(np.int64)
        fpix = fac[index]
        # merge labels that ended up equal (e.g. a metal inside and outside an angled
        # region), keeping labels apart whose uncertainties differ
        vals = base_values[mat] * fac
        first = np.unique(index.ravel(), return_index=True)[1]
        u_lab = (u * fpix).ravel()[first]
        pairs, merged = np.unique(np.stack([vals, u_lab], 1), axis=0, return_inverse=True)
        merged = np.asarray(merged).ravel()
        index = merged[index].astype(np.int32)
        mat_vals = pairs[:, 0]
        if mat_vals.size == 1 and self.value is not None:
            return EmissivityField(value=float(mat_vals[0]), description=self.description,
                                   uncertainty=u * fpix if np.any(u) else self.uncertainty)
        return EmissivityField(index=index, values=mat_vals, description=self.description,
                               uncertainty=u * fpix)


METAL_EMISSIVITY = 0.5       # below this a surface is treated as a metal (common practice, no source)
WIDE_VIEW_ANGLE_DEG = 60.0   # beyond this the Fresnel fall-off is steep (practice 45-60 deg, from memory)


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


def oblique_factor(angle_deg, refractive_index=REFRACTIVE_INDEX):
    """Ratio eps(theta)/eps(0) for a dielectric of the given refractive index.

    Applied to a near-normal emissivity from a table. The default n = 1.5 is a typical
    value for glass, paint and masonry binders in the 8-14 um band (given from memory).
    """
    th = np.deg2rad(np.asarray(angle_deg, float))
    return fresnel_emissivity(th, refractive_index) / fresnel_emissivity(0.0, refractive_index)


def view_angle_zones(shape, stack_angle=None, regions=()):
    """Viewing angle of every pixel, as zones.

    Parameters
    ----------
    shape : (int, int)
        (rows, cols) of the image.
    stack_angle : float, optional
        Angle of the whole stack [deg]; None for a normal view.
    regions : sequence of (name, mask, angle_deg)
        Regions with their own angle; a region's angle replaces the stack's for its
        pixels, and a later region replaces an earlier one where they overlap.

    Returns
    -------
    zone : ndarray of int32, shape (M, N)
        Zone of each pixel.
    angles : list of float or None
        Angle of each zone [deg] (None: seen normally, no correction).
    """
    zone = np.zeros(shape, np.int32)
    angles = [None if stack_angle is None else float(stack_angle)]
    for _, mask, angle in regions:
        a = float(angle)
        if a in angles:
            k = angles.index(a)
        else:
            angles.append(a)
            k = len(angles) - 1
        zone[np.asarray(mask, bool)] = k
    return zone, angles


def apply_view_angles(field, shape, stack_angle=None, regions=(), refractive_index=REFRACTIVE_INDEX):
    """Correct a near-normal emissivity field for oblique views, stack-wide and per region.

    Parameters
    ----------
    field : EmissivityField
        Near-normal emissivity of the pixels.
    shape : (int, int)
        (rows, cols).
    stack_angle : float, optional
        Viewing angle of the stack from the surface normal [deg].
    regions : sequence of (name, mask, angle_deg)
        Regions with their own viewing angle (see ``view_angle_zones``).
    refractive_index : float
        Real refractive index of the dielectric model (``oblique_factor``).

    Returns
    -------
    field : EmissivityField
        Corrected field (unchanged when no angle is given).
    warnings : list of str
        Views beyond ``WIDE_VIEW_ANGLE_DEG``, and pixels left uncorrected because their
        emissivity is below ``METAL_EMISSIVITY`` (metals are not modelled).

    Notes
    -----
    eps(theta) = eps(0) * eps_F(theta; n) / eps_F(0; n), with eps_F from the Fresnel
    equations for a smooth dielectric ([1]_; ``oblique_factor``). Metals, whose
    directional emissivity rises toward grazing views and depends on the surface state,
    keep their table value.
    """
    if stack_angle is None and not regions:
        return field, []
    zone, angles = view_angle_zones(shape, stack_angle, regions)
    factors = [1.0 if a is None else float(oblique_factor(a, refractive_index)) for a in angles]
    warnings = []
    eps = field.as_array(shape)
    where = [("stack", np.ones(shape, bool) if not regions else zone == 0, stack_angle)]
    where += [(f"region '{n}'", np.asarray(mk, bool), float(a)) for n, mk, a in regions]
    for label, m, a in where:
        if a is None or not m.any():
            continue
        if a > WIDE_VIEW_ANGLE_DEG:
            warnings.append(f"{label}: viewing angle {a:g} deg is beyond {WIDE_VIEW_ANGLE_DEG:g} deg from the "
                            "surface normal; the emissivity falls steeply there, so the corrected temperature "
                            "is unreliable: take the image closer to the normal")
        metal = int((m & (eps < METAL_EMISSIVITY)).sum())
        if metal and a > 0:
            warnings.append(f"{label}: {metal} pixel(s) with emissivity below {METAL_EMISSIVITY:g} (metals) get "
                            f"no viewing-angle correction: the directional emissivity of metals is not modelled")
    out = field.with_view_angles(zone, factors, metal_below=METAL_EMISSIVITY)
    parts = [f"{'stack ' if i == 0 else ''}{a:g} deg x{f:.4f}" for i, (a, f) in enumerate(zip(angles, factors))
             if a is not None]
    out.description = f"{field.description}; view-angle correction (n = {refractive_index:g}): " + ", ".join(parts)
    return out, warnings


def emissivity_by_region(base, masks, assignments, library, typed_uncertainty=0.0):
    """Emissivity assigned region by region over a default field.

    Parameters
    ----------
    base : EmissivityField
        The default emissivity of every pixel (a number, a map or a label image).
    masks : mapping of str to ndarray of bool, shape (M, N)
        The stack's region masks **in the order of its** ``regions`` **list**; a later
        region wins where regions overlap.
    assignments : mapping of str to (str or float)
        Region name -> material name from ``library`` or an emissivity typed as a number.
    library : mapping
        Material library (``name -> {emissivity, uncertainty, source}``).
    typed_uncertainty : float
        Standard uncertainty of a typed number (the config's ``uncertainty.emissivity``,
        0 when not given). A material keeps its library ``uncertainty``.

    Returns
    -------
    EmissivityField
        A map when ``base`` is a map; otherwise the label form (index image + values), one
        label per distinct (emissivity, uncertainty) pair present, so the lookup plan of
        the radiometric stage and the lookup tables of the uncertainty stage still apply.

    Raises
    ------
    KeyError
        A material name not in the library (message lists close names).

    Notes
    -----
    eps(p) = value of the last region in list order whose mask holds p, else the default
    eps_0(p). No physics beyond the assignment: the oblique-view correction
    (``apply_view_angles``) applies afterwards to the result as to any field.
    """
    order = [n for n in masks if n in assignments]
    layers = []
    for name in order:
        item = assignments[name]
        if isinstance(item, str):
            e = material_emissivity(item, library)
            u = float(library[item].get("uncertainty", 0.0))
            layers.append((name, e, u, f"{name}: {item} ({e:g})"))
        else:
            layers.append((name, float(item), float(typed_uncertainty), f"{name}: {float(item):g}"))
    desc = f"by region ({', '.join(d for *_, d in layers)}), elsewhere {base.description}"
    shape = next(iter(masks.values())).shape if masks else None
    if base.map is not None:
        m = base.map.astype(np.float64).copy()
        u = base.uncertainty_array(m.shape).copy()
        for name, e, ue, _ in layers:
            m[masks[name]] = e
            u[masks[name]] = ue
        return EmissivityField(map=m, description=desc, uncertainty=u)
    if base.value is not None:
        index = np.zeros(shape, np.int64)
        vals = [float(base.value)]
        u_lab = [float(np.asarray(base.uncertainty if base.uncertainty is not None else 0.0, float).ravel()[0])]
    else:
        index = np.asarray(base.index, np.int64).copy()
        shape = index.shape
        vals = [float(v) for v in base.values]
        u_pix = base.uncertainty_array(shape)
        u_lab = [0.0] * len(vals)
        present, first = np.unique(index.ravel(), return_index=True)
        for lab, f in zip(present, first):
            u_lab[int(lab)] = float(u_pix.ravel()[f])
    for name, e, ue, _ in layers:
        index[masks[name]] = len(vals)
        vals.append(e)
        u_lab.append(ue)
    vals, u_lab = np.asarray(vals), np.asarray(u_lab)
    used = np.unique(index)
    pairs, merged = np.unique(np.stack([vals[used], u_lab[used]], 1), axis=0, return_inverse=True)
    lut = np.zeros(vals.size, np.int64)
    lut[used] = np.asarray(merged).ravel()
    index = lut[index].astype(np.int32)
    return EmissivityField(index=index, values=pairs[:, 0].copy(), description=desc,
                           uncertainty=pairs[:, 1][index])
