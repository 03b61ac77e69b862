"""An independent 1D transient wall for heat-flow tests (shares no code with irpipe).

Finite volumes through the layers, backward Euler in time (unconditionally stable), solved
with a banded solver. Inside surface: convection to the indoor air with h_c plus exact
(T^4) radiation exchange with a radiant temperature at emissivity eps_h, the surface node
massless, the T^4 term re-linearised twice per step about the latest estimate. Outside:
one combined coefficient h_e to the outdoor air (1/h_e = R_se).

Layer data are typical design values as in ISO 10456 / CIBSE Guide A tables, given from
memory (REFERENCES.md section 10 [M]):
gypsum plaster 0.57 W/(m K), 1300 kg/m3, 1000 J/(kg K); mineral wool 0.04, 30, 1030;
brick 0.77, 1750, 840.
"""
from __future__ import annotations

import numpy as np
from scipy import constants as sc
from scipy.linalg import solve_banded
from scipy.optimize import brentq

SIGMA = sc.Stefan_Boltzmann          # CODATA via scipy.constants
K0 = 273.15

# (thickness m, conductivity W/(m K), density kg/m3, specific heat J/(kg K)); from memory
PLASTER = (0.015, 0.57, 1300.0, 1000.0)
MINERAL_WOOL = (0.10, 0.040, 30.0, 1030.0)
BRICK_LEAF = (0.1025, 0.77, 1750.0, 840.0)
SOLID_BRICK = (0.215, 0.77, 1750.0, 840.0)

INSULATED_WALL = [PLASTER, MINERAL_WOOL, BRICK_LEAF]       # inside first
SOLID_BRICK_WALL = [PLASTER, SOLID_BRICK]
# a strip of the insulated wall where the insulation is missing (a wall tie zone / gap)
BRIDGE_WALL = [PLASTER, (0.10, 0.77, 1750.0, 840.0), BRICK_LEAF]


class Wall:
    def __init__(self, layers, h_c=2.5, eps_h=0.9, h_e=25.0, dx=0.005, outside=None):
        """``outside``: None for one combined coefficient ``h_e`` to the outdoor air, or
        (h_ce, eps_e, sky_c) for convection plus exact T^4 radiation to a sky/ground
        temperature ``sky_c(t)`` [C] at the outside surface (massless node)."""
        self.outside = outside
        k, cap, dxs = [], [], []
        for d, lam, rho, c in layers:
            n = max(2, int(round(d / dx)))
            k += [lam] * n
            cap += [rho * c * d / n] * n
            dxs += [d / n] * n
        self.k, self.cap, self.dx = np.array(k), np.array(cap), np.array(dxs)
        self.h_c, self.eps_h, self.h_e = h_c, eps_h, h_e
        self.r_wall = float(np.sum(self.dx / self.k))
        # conductance between neighbouring cell centres, and centre-to-face at both ends
        self.g = 1.0 / (self.dx[:-1] / (2 * self.k[:-1]) + self.dx[1:] / (2 * self.k[1:]))
        self.g_in = 2 * self.k[0] / self.dx[0]
        self.g_out = 1.0 / (self.dx[-1] / (2 * self.k[-1]) + 1.0 / h_e)
        self.g_last = 2 * self.k[-1] / self.dx[-1]

    def surface_flux(self, ts, ta, tr):
        return self.h_c * (ta - ts) + self.eps_h * SIGMA * (tr ** 4 - ts ** 4)

    def steady_u(self, ti_c, te_c, tr_c=None):
        """In-situ U = q / (theta_ai - theta_ae) in steady state, exact radiation
        (combined outside coefficient)."""
        ta, te = ti_c + K0, te_c + K0
        tr = ta if tr_c is None else tr_c + K0
        r_rest = self.r_wall + 1.0 / self.h_e
        ts = brentq(lambda s: self.surface_flux(s, ta, tr) - (s - te) / r_rest, te, ta)
        return self.surface_flux(ts, ta, tr) / (ta - te)

    def run(self, t_end_s, dt_s, indoor_c, outdoor_c, radiant_c=None, sample_every_s=1800.0,
            spinup_s=0.0):
        """March from the steady state at t = -spinup_s; returns (times_s, surface temp [C])
        sampled every ``sample_every_s`` from t = 0 (instantaneous values)."""
        radiant_c = radiant_c or indoor_c
        n = self.k.size
        ti0, te0 = indoor_c(-spinup_s), outdoor_c(-spinup_s)
        # steady state start: linear profile through the resistances
        u_lin = 1.0 / (0.13 + self.r_wall + 1.0 / self.h_e)
        q = u_lin * (ti0 - te0)
        x_res = np.concatenate([[0.0], np.cumsum(self.dx / self.k)])[:-1] + self.dx / (2 * self.k)
        temp = ti0 + K0 - q * (0.13 + x_res)
        ts = temp[0] + 0.0
        tse = temp[-1] + 0.0
        self.outside_surface = []
        steps_per_sample = int(round(sample_every_s / dt_s))
        times, out = [], []
        nsteps = int(round((t_end_s + spinup_s) / dt_s))
        for s in range(nsteps + 1):
            t = -spinup_s + s * dt_s
            if t >= -1e-9 and (s - int(round(spinup_s / dt_s))) % steps_per_sample == 0 and t < t_end_s - 1e-9:
                times.append(t)
                out.append(ts - K0)
                self.outside_surface.append(tse - K0)
            if s == nsteps:
                break
            tn = t + dt_s
            ta, te, tr = indoor_c(tn) + K0, outdoor_c(tn) + K0, radiant_c(tn) + K0
            for _ in range(2):
                hr = 4 * self.eps_h * SIGMA * ts ** 3
                # surface node: h_c (ta - ts) + eps sigma (tr^4 - ts_p^4) - hr (ts - ts_p) = g_in (ts - T0)
                src = self.h_c * ta + self.eps_h * SIGMA * (tr ** 4 - ts ** 4) + hr * ts
                a_s = self.h_c + hr
                # eliminate ts: ts = (src + g_in T0) / (a_s + g_in)
                g_eff = self.g_in * a_s / (a_s + self.g_in)
                b_eff = self.g_in * src / (a_s + self.g_in)
                ab = np.zeros((3, n))
                diag = self.cap / dt_s
                diag = diag.copy()
                diag[:-1] += self.g
                diag[1:] += self.g
                diag[0] += g_eff
                if self.outside is None:
                    g_o, b_o = self.g_out, self.g_out * te
                else:
                    # outside surface: g_last (T_N - tse) = h_ce (tse - te) + eps_e sigma (tse^4 - tsky^4)
                    h_ce, eps_e, sky = self.outside
                    tsky = sky(tn) + K0
                    hre = 4 * eps_e * SIGMA * tse ** 3
                    src_e = h_ce * te + eps_e * SIGMA * (tsky ** 4 - tse ** 4) + hre * tse
                    a_e = h_ce + hre
                    g_o = self.g_last * a_e / (a_e + self.g_last)
                    b_o = self.g_last * src_e / (a_e + self.g_last)
                diag[-1] += g_o
                ab[0, 1:] = -self.g
                ab[1] = diag
                ab[2, :-1] = -self.g
                rhs = self.cap / dt_s * temp
                rhs[0] += b_eff
                rhs[-1] += b_o
                new = solve_banded((1, 1), ab, rhs)
                ts = (src + self.g_in * new[0]) / (a_s + self.g_in)
                if self.outside is not None:
                    tse = (src_e + self.g_last * new[-1]) / (a_e + self.g_last)
            temp = new
        return np.array(times), np.array(out)


def periodic(mean, amplitude, period_s=86400.0, phase_s=0.0):
    return lambda t: mean + amplitude * np.sin(2 * np.pi * (t - phase_s) / period_s)
