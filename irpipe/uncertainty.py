"""Measurement uncertainty of the corrected surface temperature.

The corrected temperature is the solution of the measurement equation
(``irpipe.correction``)

    T_obj = G^-1{ [S_meas - (1 - eps) G(T_refl) - S(T_air) + G(T_air)] / eps },
    G(T) = S(T) tau_eff(T; T_air, RH, d),

a function of six inputs with stated standard uncertainties: the emissivity eps, the
reflected temperature T_refl [K], the air temperature T_air [K], the relative humidity
RH [fraction] and the distance d [m] of the path (these three rebuild the path, through a
``model_factory``), and the camera reading, expressed as a standard uncertainty of the
apparent (blackbody-equivalent) temperature T_app [K] that defines S_meas = S(T_app).

Two propagations are provided:

* ``gum_uncertainty``: the law of propagation of uncertainty for uncorrelated inputs,
  u_c^2(T_obj) = sum_i c_i^2 u^2(x_i)  (Eq. 10 of [1]_), with sensitivity coefficients
  c_i = dT_obj/dx_i taken by central differences of the exact (non-linearised) inversion
  (Sect. 5.1.3 of [1]_ allows numerical derivatives). Vectorised over any array of
  pixels, or over all raw values of a lookup table.
* ``monte_carlo_uncertainty``: propagation of distributions (Gaussian inputs) by Monte
  Carlo, JCGM 101:2008 [2]_, to validate the first-order result where the model is
  strongly non-linear (low emissivity, large u(T_refl)).

The expanded uncertainty is U = k u_c with k = 2 (Sect. 6.2 of [1]_; about 95 %
coverage for a near-normal output).

References
----------
.. [1] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement" (GUM 1995 with minor corrections), BIPM (2008).
.. [2] JCGM 101:2008, "Evaluation of measurement data - Supplement 1 to the 'Guide to
   the expression of uncertainty in measurement' - Propagation of distributions using a
   Monte Carlo method", BIPM (2008).
.. [3] W. Minkina, S. Dudzik, "Infrared Thermography: Errors and Uncertainties", Wiley
   (2009), doi:10.1002/9780470682234 (uncertainty of the measurement equation).
"""
from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np

COVERAGE_FACTOR = 2.0          # k for U = k u_c, JCGM 100:2008 Sect. 6.2.2

INPUTS = ("emissivity", "reflected_temperature", "air_temperature", "relative_humidity",
          "distance", "camera")
PATH_INPUTS = ("air_temperature", "relative_humidity", "distance")

# Central-difference half steps, in the unit of each input. Small against any realistic
# standard uncertainty (so c_i is the local derivative the GUM asks for), large against
# the ~1e-6 K resolution of the float64 inverse table (so rounding does not show).
# The last two serve the field emissivity method (irpipe.fieldmethods).
STEPS = {"emissivity": 1e-3, "reflected_temperature": 0.05, "air_temperature": 0.05,
         "relative_humidity": 0.01, "distance": 0.05, "camera": 0.05,
         "contact_temperature": 0.05, "reference_emissivity": 1e-3}
# physical bounds: one-sided differences at a bound (RH = 0 or 1, d = 0)
BOUNDS = {"relative_humidity": (0.0, 1.0), "distance": (0.0, np.inf)}


@dataclass(frozen=True)
class InputUncertainties:
    """Standard uncertainties (k = 1) of the inputs of the measurement equation.

    Attributes
    ----------
    emissivity : float or ndarray
        u(eps) [fraction]; an array broadcasting with the pixels for per-material values.
    reflected_temperature : float
        u(T_refl) [K].
    air_temperature : float
        u(T_air) [K].
    relative_humidity : float
        u(RH) [fraction, 0-1].
    distance : float
        u(d) [m].
    camera : float
        u(T_app): standard uncertainty of the camera's apparent (blackbody) temperature [K].
    """

    emissivity: float | np.ndarray = 0.0
    reflected_temperature: float = 0.0
    air_temperature: float = 0.0
    relative_humidity: float = 0.0
    distance: float = 0.0
    camera: float = 0.0

    @classmethod
    def from_config(cls, section, emissivity=None):
        """From the config's ``uncertainty:`` mapping (units in the key names).

        ``emissivity`` replaces ``section['emissivity']`` when given (e.g. per-pixel
        library values).
        """
        s = section or {}
        e = s.get("emissivity", 0.0) if emissivity is None else emissivity
        return cls(emissivity=e, reflected_temperature=float(s.get("reflected_temperature_k", 0.0)),
                   air_temperature=float(s.get("air_temperature_k", 0.0)),
                   relative_humidity=float(s.get("relative_humidity_pct", 0.0)) / 100.0,
                   distance=float(s.get("distance_m", 0.0)), camera=float(s.get("camera_k", 0.0)))

    def active(self):
        """Names of the inputs with a non-zero standard uncertainty somewhere."""
        return tuple(f.name for f in fields(self) if np.any(np.asarray(getattr(self, f.name)) != 0))


class ModelCache:
    """Measurement models for perturbed path conditions, built once each.

    Parameters
    ----------
    factory : callable
        ``factory(air_temperature [K], relative_humidity [fraction], distance [m])``
        returning an ``irpipe.correction.MeasurementModel`` for that path.
    known : dict, optional
        ``{(air_temperature, relative_humidity, distance): model}`` already built
        (e.g. the stack's nominal model).

    Notes
    -----
    Models whose transmittance equals that of a model already in the cache are replaced
    by it, so a path that does not depend on an input (forced flat transmittance, d = 0)
    costs one build and is recognised as independent of it (``same``).
    """

    def __init__(self, factory, known=None):
        self.factory = factory
        self._models = {}
        for k, m in (known or {}).items():
            self._models[self._key(*k)] = m

    @staticmethod
    def _key(air_temperature, relative_humidity, distance):
        return (round(float(air_temperature), 6), round(float(relative_humidity), 8), round(float(distance), 6))

    def __call__(self, air_temperature, relative_humidity, distance):
        k = self._key(air_temperature, relative_humidity, distance)
        m = self._models.get(k)
        if m is None:
            m = self.factory(*k)
            for other in self._models.values():
                if other.flat == m.flat and np.array_equal(other.tau, m.tau) and other.camera is m.camera \
                        and other.t_range == m.t_range:
                    m = other
                    break
            self._models[k] = m
        return m

    def same(self, a, b):
        """True when two path states give the same model (the path does not change)."""
        return self(*a) is self(*b)


def path_variant(base, transmittance):
    """The measurement model of ``base`` (same camera and table range) for another path.

    Parameters
    ----------
    base : irpipe.correction.MeasurementModel
        Model of the nominal path.
    transmittance : float or ndarray of shape (K,)
        Flat or spectral transmittance of the perturbed path.

    Returns
    -------
    irpipe.correction.MeasurementModel
    """
    from .correction import MeasurementModel

    return MeasurementModel(base.camera, transmittance, base.t_range)


def _as_cache(model_factory):
    return model_factory if isinstance(model_factory, ModelCache) else ModelCache(model_factory)


def step_points(x, h, bounds=(-np.inf, np.inf)):
    """(x - h, x + h) for a central difference, clipped to ``bounds`` = (lo, hi): one-sided
    at a physical bound."""
    x = np.asarray(x, float)
    return np.maximum(x - h, bounds[0]), np.minimum(x + h, bounds[1])


def sensitivity(f, x, steps, bounds=None):
    """Sensitivity coefficients c_i = df/dx_i by central differences.

    Parameters
    ----------
    f : callable
        ``f(**{name: value})``: the output with the one input ``name`` moved to
        ``value`` and every other input at its nominal value (float or ndarray).
    x : mapping
        Nominal value of each input named in ``steps`` (float or ndarray).
    steps : mapping
        Half step h_i of each input whose coefficient is wanted, in the input's unit
        (float or ndarray broadcasting with x_i); the keys, in order, are the inputs.
    bounds : mapping, optional
        ``name -> (lo, hi)``: steps stop at these physical bounds.

    Returns
    -------
    dict
        Name -> c_i, in output units per unit of the input; NaN where either side is NaN.

    Notes
    -----
    c_i = [f(x_i^+) - f(x_i^-)] / (x_i^+ - x_i^-), x_i^+- = clip(x_i +- h_i, lo_i, hi_i),
    the other inputs at their nominal values: the numerical partial derivative that
    Sect. 5.1.3 of [1]_ allows; one-sided where a step would cross a bound. The divisor is
    the difference of the two points as evaluated, not 2 h_i.
    """
    coef = {}
    for name, h in steps.items():
        lo, hi = step_points(x[name], h, (bounds or {}).get(name, (-np.inf, np.inf)))
        f_plus = f(**{name: hi})
        f_minus = f(**{name: lo})
        with np.errstate(invalid="ignore", divide="ignore"):
            coef[name] = (f_plus - f_minus) / (hi - lo)
    return coef


def _half_step(name, x):
    """h of the central difference for one input of the measurement equation at x."""
    h = STEPS[name]
    if name == "distance":
        h = h + 0.01 * np.asarray(x, float)
    if name == "emissivity":
        h = np.minimum(h, 0.5 * np.asarray(x, float))          # keep eps - h > 0
    return h


def sensitivity_coefficients(signal, emissivity, reflected_temperature, air_temperature, relative_humidity,
                             distance, model_factory, inputs=INPUTS):
    """Sensitivity coefficients c_i = dT_obj/dx_i of the exact inversion, per pixel.

    Parameters
    ----------
    signal : ndarray
        Offset-free received signal S_meas (camera units), any shape.
    emissivity : float or ndarray
        Emissivity, broadcasting with ``signal`` [fraction].
    reflected_temperature : float or ndarray
        Reflected temperature, broadcasting with ``signal`` (e.g. (F, 1, 1)) [K].
    air_temperature : float
        Air temperature of the path [K].
    relative_humidity : float
        Relative humidity of the path [fraction].
    distance : float
        Path length [m].
    model_factory : callable or ModelCache
        ``(air_temperature, relative_humidity, distance) -> MeasurementModel``.
    inputs : sequence of str
        Which coefficients to compute (names in ``INPUTS``).

    Returns
    -------
    temperature : ndarray [K]
        T_obj at the nominal inputs (NaN where there is no physical solution).
    coefficients : dict
        Name -> ndarray of c_i, in K per unit of the input (K/K, K per unit emissivity,
        K per unit RH fraction, K/m). NaN where T_obj or a perturbed solution is NaN.

    Notes
    -----
    c_i = [T(x_i + h) - T(x_i - h)] / (2 h), other inputs at their nominal values (Sect.
    5.1.3 of [1]_); one-sided at RH = 0 or 1 and d = 0. The camera coefficient perturbs
    the apparent temperature: S_meas(T_app +- h) with T_app = S^-1(S_meas). Path inputs
    rebuild the model through ``model_factory``; the air temperature also moves the path
    emission term S(T_air) - G(T_air).
    """
    models = _as_cache(model_factory)
    ta, rh, d = float(air_temperature), float(relative_humidity), float(distance)
    base = models(ta, rh, d)
    s = np.asarray(signal, float)
    eps = np.asarray(emissivity, float)
    tr = np.asarray(reflected_temperature, float)
    shape = np.broadcast_shapes(s.shape, eps.shape, tr.shape)
    if shape == ():          # the inverse tables work on arrays
        s, eps, tr = s.reshape(1), eps.reshape(1), tr.reshape(1)

    def solve(model, s_, eps_, tr_, ta_):
        with np.errstate(invalid="ignore", divide="ignore"):
            return model.object_temperature(s_, eps_, tr_, ta_)

    t0 = solve(base, s, eps, tr, ta)
    unknown = [n for n in inputs if n not in INPUTS]
    if unknown:
        raise ValueError(f"unknown input '{unknown[0]}'; known: {', '.join(INPUTS)}")
    x = {"emissivity": eps, "reflected_temperature": tr, "air_temperature": ta, "relative_humidity": rh,
         "distance": d}
    if "camera" in inputs:
        x["camera"] = base.apparent_temperature(s)       # T_app, moved by +-h
    steps = {name: _half_step(name, x[name]) for name in inputs}
    coef = {}
    for name in ("relative_humidity", "distance"):
        # a path that does not change with this input: c = 0, no solve
        if name in steps:
            lo, hi = step_points(x[name], steps[name], BOUNDS[name])
            st = [dict(x, **{name: v}) for v in (hi, lo)]
            if all(models(v["air_temperature"], v["relative_humidity"], v["distance"]) is base for v in st):
                coef[name] = np.where(np.isfinite(t0), 0.0, np.nan)
                del steps[name]

    def moved(camera=None, **one):
        v = dict(x, **one)
        path_moved = bool(one.keys() & set(PATH_INPUTS))
        model = models(v["air_temperature"], v["relative_humidity"], v["distance"]) if path_moved else base
        s_ = s if camera is None else base.signal_table.forward_fast(camera)
        return solve(model, s_, v["emissivity"], v["reflected_temperature"], v["air_temperature"])

    coef.update(sensitivity(moved, x, steps, BOUNDS))
    coef = {name: coef[name] for name in inputs}
    if shape == ():
        return t0.reshape(()), {k: np.reshape(v, ()) for k, v in coef.items()}
    return t0, coef


def gum_uncertainty(signal, emissivity, reflected_temperature, air_temperature, relative_humidity, distance,
                    u: InputUncertainties, model_factory, budget=False):
    """Combined standard uncertainty of the corrected temperature (GUM, uncorrelated inputs).

    Parameters
    ----------
    signal, emissivity, reflected_temperature, air_temperature, relative_humidity, distance,
    model_factory
        As for ``sensitivity_coefficients``.
    u : InputUncertainties
        Standard uncertainties of the inputs; ``u.emissivity`` may be an array
        broadcasting with ``signal``.
    budget : bool
        Also return the contributions |c_i| u(x_i) [K] per input.

    Returns
    -------
    u_c : ndarray [K]
        Combined standard uncertainty, shape of the broadcast inputs; NaN where the
        corrected temperature is NaN.
    contributions : dict, only with ``budget=True``
        Name -> ndarray |c_i| u(x_i) [K], for the inputs with non-zero u.

    Notes
    -----
    u_c^2 = sum_i c_i^2 u^2(x_i)   (Eq. 10 of [1]_). The expanded uncertainty is
    ``expanded_uncertainty(u_c)`` = 2 u_c.
    """
    active = u.active()
    t0, coef = sensitivity_coefficients(signal, emissivity, reflected_temperature, air_temperature,
                                        relative_humidity, distance, model_factory, inputs=active)
    var = np.where(np.isfinite(t0), 0.0, np.nan)
    contrib = {}
    for name in active:
        ci = np.abs(coef[name]) * np.asarray(getattr(u, name), float)
        var = var + ci * ci                                   # Eq. 10 of [1]
        contrib[name] = ci
    uc = np.sqrt(var)
    return (uc, contrib) if budget else uc


def expanded_uncertainty(u_c, k=COVERAGE_FACTOR):
    """Expanded uncertainty U = k u_c [K] (JCGM 100:2008 Sect. 6.2.1); k = 2 by default."""
    return k * np.asarray(u_c, float)


@dataclass
class MonteCarloResult:
    """Summary of a JCGM 101 Monte Carlo propagation, per operating point.

    Attributes
    ----------
    mean, std : ndarray [K]
        Mean and standard deviation (the standard uncertainty) of T_obj over the trials.
    low, high : ndarray [K]
        Probabilistically symmetric coverage interval (Sect. 7.7 of [2]_).
    coverage : float
        Coverage probability of [low, high].
    trials : int
        Number of trials M.
    invalid_fraction : ndarray
        Fraction of trials without a physical solution (excluded).
    samples : ndarray of shape (P, M), optional
        The output values when asked for.
    """

    mean: np.ndarray
    std: np.ndarray
    low: np.ndarray
    high: np.ndarray
    coverage: float
    trials: int
    invalid_fraction: np.ndarray
    samples: np.ndarray | None = field(default=None, repr=False)


def monte_carlo_uncertainty(signal, emissivity, reflected_temperature, air_temperature, relative_humidity,
                            distance, u: InputUncertainties, model_factory, trials=100_000, seed=12345,
                            coverage=0.95, path_draws=32, keep_samples=False):
    """Propagation of distributions by Monte Carlo (JCGM 101:2008), Gaussian inputs.

    Parameters
    ----------
    signal : float or ndarray of shape (P,)
        Offset-free received signal at P operating points (camera units).
    emissivity, reflected_temperature : float or ndarray of shape (P,)
        Nominal emissivity [fraction] and reflected temperature [K] per point.
    air_temperature, relative_humidity, distance : float
        Nominal path: [K], [fraction], [m].
    u : InputUncertainties
        Standard uncertainties; each input is drawn from N(x, u^2), independently.
    model_factory : callable or ModelCache
        ``(air_temperature, relative_humidity, distance) -> MeasurementModel``.
    trials : int
        Number of Monte Carlo trials M per point.
    seed : int
        Seed of ``numpy.random.default_rng`` (reproducible).
    coverage : float
        Coverage probability of the reported interval.
    path_draws : int
        Number of distinct path states drawn when the path model depends on the air
        temperature, RH or distance (each needs one model from ``model_factory``).
    keep_samples : bool
        Keep the output values in the result.

    Returns
    -------
    MonteCarloResult

    Notes
    -----
    Each trial draws eps, T_refl and T_app ~ N(T_app0, u_camera^2) with S_meas = S(T_app)
    and solves the measurement equation exactly (Sect. 7 of [2]_). Path inputs that
    change the transmittance are drawn as ``path_draws`` states shared by groups of
    trials (trial j uses state j mod path_draws), because each state needs its own
    inverse table; the air temperature of a trial is then that of its state both in the
    path emission and in the transmittance. Path inputs that do not change the model
    (a forced flat transmittance) are drawn per trial. RH is clipped to [0, 1] and d to
    d >= 0. Trials without a physical solution are left out and counted.
    """
    models = _as_cache(model_factory)
    rng = np.random.default_rng(seed)
    s0 = np.atleast_1d(np.asarray(signal, float))
    eps0 = np.atleast_1d(np.asarray(emissivity, float))
    tr0 = np.atleast_1d(np.asarray(reflected_temperature, float))
    p = np.broadcast_shapes(s0.shape, eps0.shape, tr0.shape)[0]
    s0, eps0, tr0 = (np.broadcast_to(a, (p,)) for a in (s0, eps0, tr0))
    ta, rh, d = float(air_temperature), float(relative_humidity), float(distance)
    base = models(ta, rh, d)
    n = int(trials)
    u_eps = np.broadcast_to(np.atleast_1d(np.asarray(u.emissivity, float)), (p,))

    eps = eps0[:, None] + u_eps[:, None] * rng.standard_normal((p, n))
    tr = tr0[:, None] + u.reflected_temperature * rng.standard_normal((p, n))
    t_app = base.apparent_temperature(s0)
    s = base.signal_table.forward_fast(t_app[:, None] + u.camera * rng.standard_normal((p, n)))

    nominal = (ta, rh, d)
    dependent = []
    for i, name in enumerate(PATH_INPUTS):
        ux = getattr(u, name)
        if ux <= 0:
            continue
        lo_b, hi_b = BOUNDS.get(name, (-np.inf, np.inf))
        for sign in (1.0, -1.0):
            st = list(nominal)
            st[i] = min(max(st[i] + sign * ux, lo_b), hi_b)
            if not models.same(nominal, tuple(st)):
                dependent.append(name)
                break

    out = np.empty((p, n))
    if not dependent:
        t_air = ta + u.air_temperature * rng.standard_normal((p, n))
        with np.errstate(invalid="ignore", divide="ignore"):
            out[:] = base.object_temperature(s, eps, tr, t_air, fast=True)
    else:
        g = int(max(1, min(path_draws, n)))
        state = np.empty((g, 3))
        for i, name in enumerate(PATH_INPUTS):
            ux = getattr(u, name)
            x = nominal[i] + (ux * rng.standard_normal(g) if name in dependent else np.zeros(g))
            lo_b, hi_b = BOUNDS.get(name, (-np.inf, np.inf))
            state[:, i] = np.clip(x, lo_b, hi_b)
        air_shared = "air_temperature" in dependent
        t_air_trial = None if air_shared else ta + u.air_temperature * rng.standard_normal((p, n))
        group = np.arange(n) % g
        for k in range(g):
            cols = np.flatnonzero(group == k)
            m = models(*state[k])
            t_air = state[k, 0] if air_shared else t_air_trial[:, cols]
            with np.errstate(invalid="ignore", divide="ignore"):
                out[:, cols] = m.object_temperature(s[:, cols], eps[:, cols], tr[:, cols], t_air, fast=True)
    ok = np.isfinite(out)
    mean = np.array([out[i, ok[i]].mean() if ok[i].any() else np.nan for i in range(p)])
    std = np.array([out[i, ok[i]].std(ddof=1) if ok[i].sum() > 1 else np.nan for i in range(p)])
    q = [(1 - coverage) / 2 * 100, (1 + coverage) / 2 * 100]
    lohi = np.array([np.percentile(out[i, ok[i]], q) if ok[i].any() else [np.nan, np.nan] for i in range(p)])
    return MonteCarloResult(mean, std, lohi[:, 0], lohi[:, 1], float(coverage), n, 1 - ok.mean(axis=1),
                            out if keep_samples else None)
