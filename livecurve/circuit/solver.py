"""One DC solver for small stage netlists: modified nodal analysis + damped Newton.

The unknowns are the node voltages (ground excluded) and one branch current per
voltage source, op-amp output and controlled source (MNA, Ho–Ruehli–Brennan 1975).
Junctions are linearised about a limited junction voltage each iteration — the
``pnjlim`` step of Berkeley SPICE (Nagel, 1975) — so exponentials never overflow;
the whole step is further damped so no node moves more than :data:`MAX_STEP_V` per
iteration.  An op-amp's drive is limited the same way: a step that would carry it
across the middle of an output knee (the limit itself) stops there, where the law's
slope is ½, so an iterate cannot flip from rail to rail.  Sweeps are warm-started
from the previous point; a point that does not
converge is reached by source stepping (continuation in the input from the last
good point); the very first point, and any point that continuation cannot reach,
from a fresh operating point at zero input found by GMIN stepping from a large shunt
conductance down to none, then source stepping from there.

This module holds the numba kernels; :mod:`livecurve.circuit.netlist` compiles a
netlist into the arrays they take.  It is the single source of truth for curves,
tables and every export.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

# element kinds
K_R, K_I, K_V, K_D, K_Q, K_OA, K_VIN, K_E = 0, 1, 2, 3, 4, 5, 6, 7

MAX_STEP_V = 1.0  # largest node-voltage change per Newton iteration, volts
ABS_TOL_V = 1e-10  # convergence: node voltage change, volts
REL_TOL = 1e-9  # convergence: relative node voltage change
MAX_ITER = 200
GMIN_S = 1e-12


@nb.njit(cache=True, inline="always")
def _pnjlim(vnew, vold, vt, vcrit):
    # Berkeley SPICE DEVpnjlim: limit the junction voltage step above vcrit.
    if vnew > vcrit and abs(vnew - vold) > 2.0 * vt:
        if vold > 0.0:
            arg = 1.0 + (vnew - vold) / vt
            if arg > 0.0:
                vnew = vold + vt * math.log(arg)
            else:
                vnew = vcrit
        else:
            vnew = vt * math.log(vnew / vt)
        return vnew, True
    return vnew, False


@nb.njit(cache=True, inline="always")
def _exp_junction(v, is_a, nvt):
    # Shockley current and conductance; the argument is capped so a wild Newton
    # iterate cannot overflow (pnjlim keeps real iterates far below the cap).
    a = v / nvt
    if a > 80.0:
        e = math.exp(80.0)
        return is_a * (e * (1.0 + a - 80.0) - 1.0), is_a * e / nvt
    e = math.exp(a)
    return is_a * (e - 1.0), is_a * e / nvt


@nb.njit(cache=True, inline="always")
def _opamp_law(v, hi, lo, knee):
    # y = v inside [lo + knee, hi − knee]; a parabola over the last 2·knee of the drive at
    # each end joins it to the limit with matching slope (C1), so Newton always sees
    # a slope that falls smoothly to zero; returns (y, dy/dv).
    if v > hi - knee:
        if v >= hi + knee:
            return hi, 0.0
        e = v - (hi - knee)
        return v - e * e / (4.0 * knee), 1.0 - e / (2.0 * knee)
    if v < lo + knee:
        if v <= lo - knee:
            return lo, 0.0
        e = (lo + knee) - v
        return v + e * e / (4.0 * knee), 1.0 - e / (2.0 * knee)
    return v, 1.0


@nb.njit(cache=True, inline="always")
def _oalim(drive, old, hi, lo):
    # Op-amp counterpart of pnjlim: a Newton step whose drive would cross the middle of
    # an output knee (the limit itself) is stopped there, where the law's slope is ½;
    # without it an iterate can flip from rail to rail, or cycle across a narrow knee.
    if drive > old:
        if old < lo < drive:
            return lo, True
        if old < hi < drive:
            return hi, True
    elif drive < old:
        if old > hi > drive:
            return hi, True
        if old > lo > drive:
            return lo, True
    return drive, False


@nb.njit(cache=True)
def _volt(x, node):
    return 0.0 if node < 0 else x[node]


@nb.njit(cache=True)
def _add(J, f, row, col, val):
    if row >= 0 and col >= 0:
        J[row, col] += val


@nb.njit(cache=True)
def _stamp(kinds, nodes, params, branch, n_nodes, x, vin, vj, limit, gshunt, J, f):
    """Residual f (currents leaving each node; branch equations) and Jacobian J at x.

    vj holds the junction voltages of the previous iteration (updated here with the
    limited values); returns True if any junction was limited.
    """
    n = J.shape[0]
    for i in range(n):
        f[i] = 0.0
        for j in range(n):
            J[i, j] = 0.0
    limited = False
    for i in range(n_nodes):
        f[i] += gshunt * x[i]
        J[i, i] += gshunt
    for k in range(kinds.shape[0]):
        kind = kinds[k]
        a = nodes[k, 0]
        b = nodes[k, 1]
        if kind == K_R:
            g = params[k, 0]
            i_ab = g * (_volt(x, a) - _volt(x, b))
            if a >= 0:
                f[a] += i_ab
            if b >= 0:
                f[b] -= i_ab
            _add(J, f, a, a, g)
            _add(J, f, a, b, -g)
            _add(J, f, b, a, -g)
            _add(J, f, b, b, g)
        elif kind == K_I:
            cur = params[k, 0]
            if a >= 0:
                f[a] += cur
            if b >= 0:
                f[b] -= cur
        elif kind == K_V or kind == K_VIN:
            br = branch[k]
            val = vin if kind == K_VIN else params[k, 0]
            ib = x[br]
            if a >= 0:
                f[a] += ib
                J[a, br] += 1.0
                J[br, a] += 1.0
            if b >= 0:
                f[b] -= ib
                J[b, br] -= 1.0
                J[br, b] -= 1.0
            f[br] = _volt(x, a) - _volt(x, b) - val
        elif kind == K_D:
            is_a = params[k, 0]
            nvt = params[k, 1]
            vcrit = params[k, 2]
            vd = _volt(x, a) - _volt(x, b)
            vl = vd
            if limit:
                vl, lim = _pnjlim(vd, vj[k, 0], nvt, vcrit)
                limited = limited or lim
            vj[k, 0] = vl
            cur, g = _exp_junction(vl, is_a, nvt)
            cur += GMIN_S * vl
            g += GMIN_S
            i_eff = cur + g * (vd - vl)
            if a >= 0:
                f[a] += i_eff
            if b >= 0:
                f[b] -= i_eff
            _add(J, f, a, a, g)
            _add(J, f, a, b, -g)
            _add(J, f, b, a, -g)
            _add(J, f, b, b, g)
        elif kind == K_Q:
            c = a
            bb = b
            e = nodes[k, 2]
            is_a = params[k, 0]
            bf = params[k, 1]
            brv = params[k, 2]
            vtf = params[k, 3]
            vtr = params[k, 4]
            pol = params[k, 5]
            vcrit_f = params[k, 6]
            vcrit_r = params[k, 7]
            vb = _volt(x, bb)
            vbe = pol * (vb - _volt(x, e))
            vbc = pol * (vb - _volt(x, c))
            vbe_l = vbe
            vbc_l = vbc
            if limit:
                vbe_l, l1 = _pnjlim(vbe, vj[k, 0], vtf, vcrit_f)
                vbc_l, l2 = _pnjlim(vbc, vj[k, 1], vtr, vcrit_r)
                limited = limited or l1 or l2
            vj[k, 0] = vbe_l
            vj[k, 1] = vbc_l
            ibe, gbe = _exp_junction(vbe_l, is_a, vtf)
            ibc, gbc = _exp_junction(vbc_l, is_a, vtr)
            # Ebers-Moll transport form as in SPICE's Gummel-Poon with qb = 1;
            # GMIN across each junction adds to the base current.
            ic = ibe - ibc - ibc / brv - GMIN_S * vbc_l
            ib = ibe / bf + ibc / brv + GMIN_S * (vbe_l + vbc_l)
            dic_dbe = gbe
            dic_dbc = -gbc * (1.0 + 1.0 / brv) - GMIN_S
            dib_dbe = gbe / bf + GMIN_S
            dib_dbc = gbc / brv + GMIN_S
            dbe = vbe - vbe_l
            dbc = vbc - vbc_l
            ic_eff = ic + dic_dbe * dbe + dic_dbc * dbc
            ib_eff = ib + dib_dbe * dbe + dib_dbc * dbc
            ie_eff = -(ic_eff + ib_eff)
            die_dbe = -(dic_dbe + dib_dbe)
            die_dbc = -(dic_dbc + dib_dbc)
            # terminal currents (into the device = leaving the node) are pol * i
            if c >= 0:
                f[c] += pol * ic_eff
            if bb >= 0:
                f[bb] += pol * ib_eff
            if e >= 0:
                f[e] += pol * ie_eff
            # d(pol*i)/dv_node: vbe = pol(vb - ve), vbc = pol(vb - vc), pol^2 = 1
            _add(J, f, c, bb, dic_dbe + dic_dbc)
            _add(J, f, c, e, -dic_dbe)
            _add(J, f, c, c, -dic_dbc)
            _add(J, f, bb, bb, dib_dbe + dib_dbc)
            _add(J, f, bb, e, -dib_dbe)
            _add(J, f, bb, c, -dib_dbc)
            _add(J, f, e, bb, die_dbe + die_dbc)
            _add(J, f, e, e, -die_dbe)
            _add(J, f, e, c, -die_dbc)
        elif kind == K_OA:
            # op-amp: output = limit(A·(vp − vn + vos)), linear inside the swing with a
            # quadratic knee at each end (netlist.opamp_law, the same law)
            out = nodes[k, 2]
            br = branch[k]
            a_ol = params[k, 0]
            hi = params[k, 1]
            lo = params[k, 2]
            drive = a_ol * (_volt(x, a) - _volt(x, b) + params[k, 4])
            dl = drive
            if limit:
                dl, lim = _oalim(drive, vj[k, 0], hi, lo)
                limited = limited or lim
            vj[k, 0] = dl
            y, slope = _opamp_law(dl, hi, lo, params[k, 3])
            g = a_ol * slope
            ib = x[br]
            if out >= 0:
                f[out] += ib
                J[out, br] += 1.0
                J[br, out] += 1.0
            f[br] = _volt(x, out) - (y + slope * (drive - dl))
            if a >= 0:
                J[br, a] -= g
            if b >= 0:
                J[br, b] += g
        elif kind == K_E:
            # linear VCVS: v(out) - v(ref) = gain * (vp - vn)
            out = nodes[k, 2]
            ref = nodes[k, 3]
            br = branch[k]
            gain = params[k, 0]
            ib = x[br]
            if out >= 0:
                f[out] += ib
                J[out, br] += 1.0
                J[br, out] += 1.0
            if ref >= 0:
                f[ref] -= ib
                J[ref, br] -= 1.0
                J[br, ref] -= 1.0
            f[br] = _volt(x, out) - _volt(x, ref) - gain * (_volt(x, a) - _volt(x, b))
            if a >= 0:
                J[br, a] -= gain
            if b >= 0:
                J[br, b] += gain
    return limited


@nb.njit(cache=True)
def _lu_solve(J, rhs, dx):
    """Solve J dx = rhs in place (Gaussian elimination, partial pivoting). False if singular."""
    n = J.shape[0]
    for i in range(n):
        dx[i] = rhs[i]
    for col in range(n):
        piv = col
        best = abs(J[col, col])
        for r in range(col + 1, n):
            if abs(J[r, col]) > best:
                best = abs(J[r, col])
                piv = r
        if best < 1e-300:
            return False
        if piv != col:
            for c in range(n):
                tmp = J[col, c]
                J[col, c] = J[piv, c]
                J[piv, c] = tmp
            tmp = dx[col]
            dx[col] = dx[piv]
            dx[piv] = tmp
        inv = 1.0 / J[col, col]
        for r in range(col + 1, n):
            m = J[r, col] * inv
            if m != 0.0:
                for c in range(col + 1, n):
                    J[r, c] -= m * J[col, c]
                dx[r] -= m * dx[col]
    for r in range(n - 1, -1, -1):
        s = dx[r]
        for c in range(r + 1, n):
            s -= J[r, c] * dx[c]
        dx[r] = s / J[r, r]
    return True


@nb.njit(cache=True)
def _newton(kinds, nodes, params, branch, n_nodes, x, vin, vj, gshunt, J, f, dx):
    """Damped Newton at one input value; x is the start and the result. Returns iterations or -1."""
    n = x.shape[0]
    for it in range(MAX_ITER):
        limited = _stamp(kinds, nodes, params, branch, n_nodes, x, vin, vj, True, gshunt, J, f)
        for i in range(n):
            f[i] = -f[i]
        if not _lu_solve(J, f, dx):
            return -1
        big = 0.0
        for i in range(n_nodes):
            if abs(dx[i]) > big:
                big = abs(dx[i])
        scale = 1.0
        if big > MAX_STEP_V:
            scale = MAX_STEP_V / big
        converged = not limited and scale == 1.0
        for i in range(n):
            if i < n_nodes and abs(dx[i]) > ABS_TOL_V + REL_TOL * abs(x[i]):
                converged = False
            x[i] += scale * dx[i]
        if not np.isfinite(x).all():
            return -1
        if converged:
            return it + 1
    return -1


@nb.njit(cache=True)
def _cold_start(kinds, nodes, params, branch, n_nodes, x, vj, J, f, dx):
    """Operating point at zero input from x = 0 by GMIN stepping (shunt 1e-2 S down to none).

    x and vj receive the result; returns False if a step fails.
    """
    x[:] = 0.0
    vj[:, :] = 0.0
    g = 1e-2
    while g > 1e-13:
        if _newton(kinds, nodes, params, branch, n_nodes, x, 0.0, vj, g, J, f, dx) < 0:
            return False
        g *= 0.1
    return _newton(kinds, nodes, params, branch, n_nodes, x, 0.0, vj, 0.0, J, f, dx) >= 0


@nb.njit(cache=True)
def _source_step(kinds, nodes, params, branch, n_nodes, x, vj, x_from, vj_from, v_from, v_to,
                 J, f, dx):
    """Continuation in the input from (x_from at v_from) to v_to, in 2, 8, … 2048 equal steps.

    x and vj receive the result; returns False if every subdivision fails.
    """
    sub = 2
    while sub <= 4096:
        x[:] = x_from
        vj[:, :] = vj_from
        fine = True
        for j in range(1, sub + 1):
            v = v_from + (v_to - v_from) * j / sub
            if _newton(kinds, nodes, params, branch, n_nodes, x, v, vj, 0.0, J, f, dx) < 0:
                fine = False
                break
        if fine:
            return True
        sub *= 4
    return False


@nb.njit(cache=True)
def _solve_sweep(kinds, nodes, params, branch, n_nodes, vin, x0, warm, xs, ok):
    """Solve the netlist for every input value in order, warm-starting each from the last.

    A point that does not converge from the last good one is reached by source stepping
    from it; failing that (e.g. an op-amp whose saturated output gives Newton no slope to
    follow back), by a fresh operating point at zero input (GMIN stepping) and source
    stepping from there — the fallback SPICE's DC sweep takes too.
    xs[i] receives the solution for vin[i]; ok[i] whether it converged.  With *warm*,
    the first point is tried from x0 (the solution of a nearby problem, e.g. the previous
    sweep of the same stage at another knob value) before any of that.
    """
    n = x0.shape[0]
    J = np.zeros((n, n))
    f = np.zeros(n)
    dx = np.zeros(n)
    x = x0.copy()
    vj = np.zeros((kinds.shape[0], 2))
    x_good = x.copy()
    vj_good = vj.copy()
    x_cold = x.copy()
    vj_cold = vj.copy()
    v_good = 0.0
    have_good = False
    have_cold = False
    tried_cold = False
    for i in range(vin.shape[0]):
        done = False
        if have_good or (i == 0 and warm):
            done = _newton(kinds, nodes, params, branch, n_nodes, x, vin[i], vj, 0.0, J, f,
                           dx) >= 0
            if not done and have_good:
                done = _source_step(kinds, nodes, params, branch, n_nodes, x, vj, x_good,
                                    vj_good, v_good, vin[i], J, f, dx)
        if not done:
            if not tried_cold:
                tried_cold = True
                have_cold = _cold_start(kinds, nodes, params, branch, n_nodes, x_cold,
                                        vj_cold, J, f, dx)
            if have_cold:
                done = _source_step(kinds, nodes, params, branch, n_nodes, x, vj, x_cold,
                                    vj_cold, 0.0, vin[i], J, f, dx)
        if done:
            xs[i, :] = x
            ok[i] = True
            x_good[:] = x
            vj_good[:, :] = vj
            v_good = vin[i]
            have_good = True
        else:
            xs[i, :] = np.nan
            ok[i] = False
            x[:] = x_good
            vj[:, :] = vj_good
