"""Tables of the measurement model, computed once and shared by every stack and every
uncertainty variant that needs them.

A ``MeasurementModel`` (``irpipe.correction``) holds two monotone tables on the dense
temperature grid T_i of ``radiometry.node_temperatures`` (16384 nodes): the camera
signal S(T_i) and the signal after the path G(T_i) = S(T_i) tau_eff(T_i), from the band
integrals

    L(T_i)     = sum_k w_k L_lambda(lambda_k, T_i),
    L_tau(T_i) = sum_k w_k tau_k L_lambda(lambda_k, T_i),    tau_eff = L_tau / L

(trapezoid weights w_k of the spectral response, Planck's law L_lambda [1]_, spectral
path transmittance tau_k). Planck's law at (lambda_k, T_i) depends on the response's
wavelengths and the temperature range only, not on the path, and evaluating it is
nearly all of a model's cost. So this module keeps, per process:

* the path-free band radiance L(T_i) on every node, once per response and range
  (``_plain_nodes``; Planck's law evaluated in blocks as it goes, not kept);
* per path, the band transmittance tau_eff(T) = L_tau / L integrated on every
  ``COARSE_STEP``-th node and interpolated linearly in 1/T in between (tau_eff is smooth
  in T: within 7e-9 relative for paths up to 30 m at 95 % RH over the 7.5-14 um band and
  the default range, about 4e-7 K in temperature; ``tests/test_modeltables.py``), from
  Planck's law on the coarse nodes, kept per response and range (``_coarse_planck``,
  5 MB). A new path (distance, humidity, air temperature) then costs one weighted sum
  over a sixteenth of the nodes;
* ``planck_table(response, t_range)``: Planck's law on every node, for the exact
  reference tables (``coarse=False``, used by the tests and the demo's scene generator):
  least recently used tables are dropped beyond ``PLANCK_CACHE_BYTES`` (a 7.5-14 um band
  of 1301 nodes takes 85 MB in float32); a table larger than that alone is not kept;
* ``measurement_tables(camera, transmittance, t_range)``: the signal and path tables
  per (camera, transmittance, range), so stacks with equal conditions share them (the
  ``MAX_PATH_TABLES`` most recently used, about 0.5 MB each with their inverse grids:
  room for the nominal and six perturbed paths of a few stacks, so that neighbouring
  stacks taken under equal conditions share them while a survey of hundreds of stacks
  at their own distances keeps the memory of a few). Signal tables, which do not depend
  on the path, are shared between paths whenever their samples are equal.

Numbers do not change: a kept table holds the values the same float operations give on
the same inputs (the same Planck blocks, the same matrix products, the same table
construction), so a model built from the caches equals, bit for bit, one built without
them (``disabled()``; tested in ``tests/test_modeltables.py``). Keys are the contents
(bytes) of the response's wavelengths and weights, the calibration, the range and the
transmittance, never object identities, so equal conditions hit across runs in one
process. The state is per process and guarded by a lock (the chain runs stages in
threads); a forked worker starts with its parent's tables.

References
----------
.. [1] M. Planck, "Ueber das Gesetz der Energieverteilung im Normalspectrum",
   Annalen der Physik 309(3), 553-563 (1901), doi:10.1002/andp.19013090310.
"""
from __future__ import annotations

import contextlib
import hashlib
import threading
from collections import OrderedDict

import numpy as np

from .radiometry import MonotoneTable, node_temperatures

PLANCK_CACHE_BYTES = 256 * 2**20   # bound of the kept Planck tables [bytes]
MAX_PATH_TABLES = 32               # (signal, path) table pairs kept
MAX_SIGNAL_TABLES = 8              # distinct signal tables kept

_lock = threading.RLock()
_planck: OrderedDict = OrderedDict()
_paths: OrderedDict = OrderedDict()
_signals: OrderedDict = OrderedDict()
_state = {"enabled": True, "planck_hits": 0, "planck_misses": 0, "path_hits": 0, "path_misses": 0}


def _digest(*arrays):
    """Content key of arrays: dtype, shape and bytes."""
    h = hashlib.blake2b(digest_size=20)
    for a in arrays:
        a = np.ascontiguousarray(a)
        h.update(f"{a.dtype.str}{a.shape}".encode())
        h.update(a.data)
    return h.digest()


_response_keys: OrderedDict = OrderedDict()


def _response_key(response, weights=True):
    """Content key of a response's wavelengths (and weights), remembered per response
    object (the arrays of a ``SpectralResponse`` are not changed after it is made)."""
    k = (id(response), weights)
    with _lock:
        hit = _response_keys.get(k)
        if hit is not None and hit[0] is response:
            return hit[1]
        key = _digest(response.wavelength, response.weights) if weights else _digest(response.wavelength)
        _response_keys[k] = (response, key)           # the object is kept, so its id stays its own
        while len(_response_keys) > 32:
            _response_keys.popitem(last=False)
        return key


def _samples_key(samples):
    """Content key of a sample array; the kept path-free arrays (``_kept_plain``), which
    every path of a camera passes again, are hashed once."""
    for value, key in _plain_keys.values():
        if value is samples:
            return key
    key = _digest(samples)
    if any(v is samples for v in _plain.values()):
        _plain_keys[id(samples)] = (samples, key)
    return key


def _coarse_index(size):
    """Every ``COARSE_STEP``-th of ``size`` table nodes and the last."""
    return np.unique(np.r_[np.arange(0, size, COARSE_STEP), size - 1])


def _camera_key(camera):
    return (_response_key(camera.response), camera.kind, tuple(float(v) for v in camera.sh))


def planck_table(response, t_range, n=4096, step=1):
    """Planck's law at ``response``'s wavelengths on ``node_temperatures(*t_range, n)``.

    Parameters
    ----------
    response : irpipe.radiometry.SpectralResponse
    t_range : (float, float)
        Temperature range of the tables [K].
    n : int
        Nodes of the inverse table (the grid has 4 n temperatures).
    step : int
        Keep every ``step``-th node of the grid and the last (``COARSE_STEP`` for the
        coarse transmittance nodes); 1 for every node.

    Returns
    -------
    irpipe.radiometry.PlanckTable or None
        The shared table; None when the caches are disabled or the table alone exceeds
        ``PLANCK_CACHE_BYTES`` (then band integrals evaluate Planck's law as they go,
        with the same result).
    """
    t0, t1 = float(t_range[0]), float(t_range[1])
    nodes = -(-4 * int(n) // step) + (1 if (4 * int(n) - 1) % step else 0)
    size = nodes * response.wavelength.size * 4        # float32 (radiometry._planck_blocks)
    if not _state["enabled"] or size > PLANCK_CACHE_BYTES:
        return None
    key = (_response_key(response, weights=False), t0, t1, int(n), int(step))
    with _lock:
        table = _planck.get(key)
        if table is not None:
            _planck.move_to_end(key)
            _state["planck_hits"] += 1
            return table
        _state["planck_misses"] += 1
        t_nodes = node_temperatures(t0, t1, n)
        if step > 1:
            t_nodes = t_nodes[_coarse_index(t_nodes.size)]
        table = response.planck_table(t_nodes)
        _planck[key] = table
        while sum(t.nbytes for t in _planck.values()) > PLANCK_CACHE_BYTES:
            _planck.popitem(last=False)
        return table


def _signal_table(func, t_range, samples):
    """The signal table with these samples: one object per distinct sample array."""
    if not _state["enabled"]:
        return MonotoneTable(func, *t_range, samples=samples)
    key = (t_range, _samples_key(samples))
    table = _signals.get(key)
    if table is None:
        table = MonotoneTable(func, *t_range, samples=samples)
        _signals[key] = table
        while len(_signals) > MAX_SIGNAL_TABLES:
            _signals.popitem(last=False)
    else:
        _signals.move_to_end(key)
    return table


#: perturbed paths: the path's band transmittance on every COARSE_STEP-th table node
COARSE_STEP = 16
_plain: OrderedDict = OrderedDict()
_plain_keys: dict = {}        # id -> (kept path-free array, its content key)


def _kept_plain(key, make):
    """A path-free array kept under ``key`` (the ``MAX_SIGNAL_TABLES`` most recent), made by
    ``make()`` when missing or when the caches are disabled."""
    value = _plain.get(key) if _state["enabled"] else None
    if value is None:
        value = make()
        if _state["enabled"]:
            _plain[key] = value
            while len(_plain) > MAX_SIGNAL_TABLES:
                _, gone = _plain.popitem(last=False)
                _plain_keys.pop(id(gone), None)
    return value


def _plain_nodes(camera, t_range, t_nodes):
    """S(T) of the camera on every table node (path-independent; kept per camera and range)."""
    if camera.kind == "band":
        return _kept_plain((_camera_key(camera), t_range), lambda: _plain_band(camera.response, t_range, t_nodes))
    return _kept_plain((_camera_key(camera), t_range), lambda: camera.signal(t_nodes))


def _plain_band(response, t_range, t_nodes):
    """The band radiance L(T) without a path on the table nodes, the same for every path of
    the response (kept with the plain signal, ``_plain_nodes``). Planck's law is evaluated
    in blocks as the sum goes and not kept: a kept table gives the same numbers
    (``radiometry.SpectralResponse._planck_blocks``) at 85 MB per process."""
    return _kept_plain(("plain-band", _response_key(response), t_range),
                       lambda: response.band_radiance(t_nodes))


def _coarse_plain(response, t_range, ptc):
    """L(T) on the coarse nodes (kept per response and range, like the coarse table)."""
    return _kept_plain(("coarse-plain", _response_key(response), t_range),
                       lambda: response.band_radiance(ptc))


def _coarse_planck(response, t_range, t_nodes):
    """Planck's law on every COARSE_STEP-th table node and the last (kept per response and
    range with the other Planck tables; evaluated afresh when the caches are disabled)."""
    table = planck_table(response, t_range, step=COARSE_STEP)
    if table is None:
        table = response.planck_table(t_nodes[_coarse_index(t_nodes.size)])
    return table


def measurement_tables(camera, transmittance, t_range, path_signal, coarse=False):
    """The signal and path tables of a measurement model, shared by equal conditions.

    Parameters
    ----------
    camera : irpipe.correction.CameraModel
    transmittance : float or ndarray of shape (K,)
        Flat path transmittance, or spectral values at ``camera.response.wavelength``.
    t_range : (float, float)
        Temperature range of the tables [K].
    path_signal : callable
        Exact G(T) of the model (kept as the path table's ``func``).
    coarse : bool
        The band transmittance tau_eff(T) = L_tau / L is integrated on every
        ``COARSE_STEP``-th node only and interpolated linearly in 1/T between them (see
        the module docstring for the accuracy), so a new path costs a sixteenth of the
        weighted sums. False integrates on every node (the reference).

    Returns
    -------
    signal_table, path_table : irpipe.radiometry.MonotoneTable
        S(T) and G(T) = S(T) tau_eff(T) sampled on the table nodes.

    Raises
    ------
    ValueError
        If S or G is not positive and strictly increasing over the range.

    Notes
    -----
    One set of Planck evaluations on the nodes (``planck_table``) serves both tables:
    S = L and tau_eff = L_tau / L for a band camera; S is the Sakuma-Hattori signal
    otherwise. A flat transmittance gives G = S tau.
    """
    t_range = (float(t_range[0]), float(t_range[1]))
    tau = np.asarray(transmittance, dtype=float)
    with _lock:
        key = (_camera_key(camera), t_range, _digest(tau), bool(coarse)) if _state["enabled"] else None
        if key is not None and key in _paths:
            _paths.move_to_end(key)
            _state["path_hits"] += 1
            return _paths[key]
        _state["path_misses"] += 1
        t_nodes = node_temperatures(*t_range)
        r = camera.response
        band = camera.kind == "band"
        if coarse and tau.ndim == 1:
            ptc = _coarse_planck(r, t_range, t_nodes)
            l_plain_c, l_tau_c = _coarse_plain(r, t_range, ptc), r.band_radiance(ptc, tau)
            inv_c = 1.0 / ptc.temperature
            tau_eff = np.interp(1.0 / t_nodes, inv_c[::-1], (l_tau_c / l_plain_c)[::-1])
            s_nodes = _plain_nodes(camera, t_range, t_nodes)
            g_nodes = s_nodes * tau_eff
        elif tau.ndim == 0:
            if band:
                s_nodes = _plain_nodes(camera, t_range, t_nodes)
            else:
                s_nodes = camera.signal(t_nodes)
            g_nodes = s_nodes * float(tau)
        else:
            # the exact reference: every node
            pt = planck_table(r, t_range)
            l_plain = _plain_nodes(camera, t_range, t_nodes) if band else _plain_band(r, t_range, t_nodes)
            l_tau = r.band_radiance(t_nodes if pt is None else pt, tau)
            s_nodes = l_plain if band else camera.signal(t_nodes)
            g_nodes = s_nodes * (l_tau / l_plain)
        tables = (_signal_table(camera.signal, t_range, s_nodes),
                  MonotoneTable(path_signal, *t_range, samples=g_nodes))
        if key is not None:
            _paths[key] = tables
            while len(_paths) > MAX_PATH_TABLES:
                _paths.popitem(last=False)
        return tables


def cache_info():
    """Entries, bytes and hit counts of the shared tables (for benchmarks and tests)."""
    with _lock:
        return {"planck_tables": len(_planck), "planck_bytes": sum(t.nbytes for t in _planck.values()),
                "path_tables": len(_paths), "signal_tables": len(_signals),
                **{k: v for k, v in _state.items() if k != "enabled"}}


def clear():
    """Drop every kept table and reset the counters."""
    with _lock:
        _planck.clear()
        _paths.clear()
        _signals.clear()
        _plain.clear()
        _plain_keys.clear()
        _response_keys.clear()
        _state.update(planck_hits=0, planck_misses=0, path_hits=0, path_misses=0)


@contextlib.contextmanager
def disabled():
    """Build tables without the caches inside the block (reference for tests and benchmarks)."""
    with _lock:
        before = _state["enabled"]
        _state["enabled"] = False
    try:
        yield
    finally:
        with _lock:
            _state["enabled"] = before
