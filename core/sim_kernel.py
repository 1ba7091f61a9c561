"""The step loop of the sampled drive, compiled with numba.

Everything here is plain arrays and scalars; :mod:`core.simulate` builds them from
the axis, gains and scenario and documents the model. The function is written so
that ``run_kernel.py_func`` (the same source, interpreted) is the pure-Python
reference the benchmark times it against.

Parameter vectors (indices are the ``F_*`` / ``I_*`` constants below).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# float parameters
F_TC, F_KP_I, F_KI_I, F_KP_W, F_KI_W, F_KP_P, F_KI_P, F_VFF, F_AFF, F_KE_FF, F_VMAX, F_IMAX, \
    F_WMAX, F_CPR, F_TT_I, F_TT_W, F_TT_P, F_VFRAC, F_PL, F_FC_M, F_FC_L, F_I_DIV, F_W_DIV, \
    F_ILP_B0, F_ILP_B1, F_ILP_A1 = range(26)
N_F = 26
# integer parameters
I_MODE, I_NS, I_NP, I_VDELAY, I_IDELAY, I_WDELAY, I_EDELAY, I_AW, I_LIMITS, I_COMPLIANT, \
    I_N = range(11)
N_I = 11

MODE_CURRENT, MODE_SPEED, MODE_POSITION, MODE_VOLTAGE = 0, 1, 2, 3
AW_OFF, AW_CLAMP, AW_BACK = 0, 1, 2

# output channels
CH_I, CH_I_CMD, CH_I_MEAS, CH_V_CMD, CH_V_APPLIED, CH_V_D, CH_W_M, CH_TH_M, CH_W_L, CH_TH_L, \
    CH_W_CMD, CH_W_FB, CH_TH_REF, CH_TH_MEAS, CH_E_I, CH_E_W, CH_E_P, CH_SAT_V, CH_SAT_I, \
    CH_SAT_W, CH_T_LOAD, CH_V_DEMAND, CH_P_FRIC = range(23)
N_CH = 23


@njit(cache=True)
def _pi_step(e, integ, kp, ki_t, lim, kb_t, aw, limits, ff):
    """One backward-Euler PI update with anti-windup; returns (u, integ, saturated).

    ``ki_t`` = Ki*Ts, ``kb_t`` = Ts/Tt (back-calculation tracking), ``ff`` a feedforward
    added before the limit.
    """
    cand = integ + ki_t * e
    u = kp * e + cand + ff
    if not limits or abs(u) <= lim:
        return u, cand, False
    us = lim if u > 0 else -lim
    if aw == AW_CLAMP:
        # conditional integration: freeze the integrator while it would push further into the limit
        if e * u > 0:
            cand = integ
    elif aw == AW_BACK:
        # back-calculation: bleed the integrator by (u_sat - u)/Tt
        cand = cand + kb_t * (us - u)
    return us, cand, True


@njit(cache=True)
def _biquads(x, sos, state):
    """Cascade of second-order sections, direct form II transposed; sos rows b0 b1 b2 a1 a2."""
    y = x
    for s in range(sos.shape[0]):
        b0, b1, b2, a1, a2 = sos[s, 0], sos[s, 1], sos[s, 2], sos[s, 3], sos[s, 4]
        out = b0 * y + state[s, 0]
        state[s, 0] = b1 * y - a1 * out + state[s, 1]
        state[s, 1] = b2 * y - a2 * out
        y = out
    return y


@njit(cache=True)
def run_kernel(ad, bd, ac, bc, fp, ip, sos_fb, sos_cmd, ref_a, ref_b, ref_c, t_load, out):
    """Run the sampled cascade for ``ip[I_N]`` current-loop samples.

    Parameters
    ----------
    ad, bd : ndarray
        Discrete plant (ZOH over one current-loop sample): x+ = ad x + bd u,
        x = [i, w_m, th_m(, w_l, th_l)], u = [v, T_load, T_fric_motor, T_fric_load].
    ac, bc : ndarray
        Continuous plant, for the stiction test.
    fp, ip : ndarray
        Float and integer parameters (see the module constants).
    sos_fb, sos_cmd : ndarray
        Speed feedback and speed command filter sections (rows b0 b1 b2 a1 a2).
    ref_a, ref_b, ref_c : ndarray
        References per current-loop sample: current mode (i*, -, -); speed mode
        (w*, -, -); position mode (th*, w_ff, a_ff in motor rad, rad/s, rad/s^2);
        voltage mode (v, -, -).
    t_load : ndarray
        Load torque at the motor shaft averaged over each sample, N*m.
    out : ndarray
        (N_CH, n) array filled with the traces, one row per channel (so each trace is a
        contiguous row the caller can hand out without copying).

    Returns
    -------
    int
        Number of samples completed (n, or the sample where the state diverged).
    """
    n = ip[I_N]
    nx = ad.shape[0]
    mode = ip[I_MODE]
    ns = ip[I_NS]
    nsp = ip[I_NS] * ip[I_NP]
    limits = ip[I_LIMITS] != 0
    aw = ip[I_AW]
    compliant = ip[I_COMPLIANT] != 0
    tc = fp[F_TC]
    tw = tc * ns
    tp = tw * ip[I_NP]
    kp_i, ki_i_t = fp[F_KP_I], fp[F_KI_I] * tc
    kp_w, ki_w_t = fp[F_KP_W], fp[F_KI_W] * tw
    kp_p, ki_p_t = fp[F_KP_P], fp[F_KI_P] * tp
    kb_i, kb_w, kb_p = tc / fp[F_TT_I], tw / fp[F_TT_W], tp / fp[F_TT_P]
    vmax, imax, wmax = fp[F_VMAX], fp[F_IMAX], fp[F_WMAX]
    cpr = fp[F_CPR]
    vfrac = fp[F_VFRAC]
    pl = fp[F_PL]
    fc_m, fc_l = fp[F_FC_M], fp[F_FC_L]
    ib0, ib1, ia1 = fp[F_ILP_B0], fp[F_ILP_B1], fp[F_ILP_A1]
    vdel = ip[I_VDELAY]
    idel = ip[I_IDELAY]
    wdel = ip[I_WDELAY]
    edel = ip[I_EDELAY]

    # Ring buffers of held controller outputs, one entry per current-loop sample. A ring of
    # length d + 1 written at k % (d + 1) holds the value of sample k - d in the slot after
    # the one written; the slots and the loop phases are kept as counters, because the
    # integer remainders per sample were about a quarter of the kernel's time.
    lv = vdel + 2
    lw = wdel + 1
    li = idel + 1
    le = edel + 1
    kv = kw = ki = ke = 0          # k % lv, k % lw, k % li, k % le
    phase_s = phase_p = 0          # k % ns, k % (ns * np)
    ring_v = np.zeros(lv)
    ring_wc = np.zeros(lw)
    ring_iff = np.zeros(lw)
    ring_ic = np.zeros(li)
    ring_is = np.zeros(li)
    ring_e = np.zeros(le)
    st_fb = np.zeros((sos_fb.shape[0], 2))
    st_cmd = np.zeros((sos_cmd.shape[0], 2))

    x = np.zeros(nx)
    xn = np.zeros(nx)
    u = np.zeros(4)
    integ_i = 0.0
    integ_w = 0.0
    integ_p = 0.0
    ilp_state = 0.0
    pos_w = 0.0
    pos_iff = 0.0
    pos_sat = False
    spd_i = 0.0
    spd_sat = False
    w_est = 0.0
    w_fb = 0.0
    w_cmd = 0.0
    e_w = 0.0
    e_p = 0.0
    thq_prev = math.floor(x[2] * cpr) / cpr
    w_idx_l = 3
    th_idx_l = 4

    for k in range(n):
        i_act = x[0]
        # --- sensors: current (optional Tustin low-pass), encoder (floor to counts)
        if ib0 != 1.0 or ib1 != 0.0 or ia1 != 0.0:
            i_meas = ib0 * i_act + ilp_state
            ilp_state = ib1 * i_act - ia1 * i_meas
        else:
            i_meas = i_act
        thq = math.floor(x[2] * cpr) / cpr

        # --- position loop (every ns*np samples)
        if mode == MODE_POSITION and phase_p == 0:
            e_p = ref_a[k] - thq
            pos_w, integ_p, pos_sat = _pi_step(e_p, integ_p, kp_p, ki_p_t, wmax, kb_p, aw, limits,
                                               fp[F_VFF] * ref_b[k])
            pos_iff = fp[F_AFF] * ref_c[k]
        ring_wc[kw] = pos_w
        ring_iff[kw] = pos_iff
        j = k - wdel
        rd = kw + 1 if kw + 1 < lw else 0
        w_cmd_d = ring_wc[rd] if j >= 0 else 0.0
        iff_d = ring_iff[rd] if j >= 0 else 0.0

        # --- speed estimate (backward difference of counts) and speed loop (every ns samples)
        if phase_s == 0:
            w_est = (thq - thq_prev) / tw
            thq_prev = thq
        ring_e[ke] = w_est
        j = k - edel
        w_est_d = ring_e[ke + 1 if ke + 1 < le else 0] if j >= 0 else 0.0
        if phase_s == 0:
            w_fb = _biquads(w_est_d, sos_fb, st_fb)
            if mode == MODE_SPEED:
                w_ref = ref_a[k]
                if limits and abs(w_ref) > wmax:
                    w_ref = wmax if w_ref > 0 else -wmax
                w_cmd = _biquads(w_ref, sos_cmd, st_cmd)
            elif mode == MODE_POSITION:
                w_cmd = _biquads(w_cmd_d, sos_cmd, st_cmd)
            if mode == MODE_SPEED or mode == MODE_POSITION:
                e_w = w_cmd - w_fb
                spd_i, integ_w, spd_sat = _pi_step(e_w, integ_w, kp_w, ki_w_t, imax, kb_w, aw, limits, iff_d)
        ring_ic[ki] = spd_i
        ring_is[ki] = 1.0 if spd_sat else 0.0
        j = k - idel
        rd = ki + 1 if ki + 1 < li else 0
        if mode == MODE_CURRENT:
            i_cmd = ref_a[k]
            i_sat = False
            if limits and abs(i_cmd) > imax:
                i_cmd = imax if i_cmd > 0 else -imax
                i_sat = True
        elif mode == MODE_VOLTAGE:
            i_cmd = 0.0
            i_sat = False
        else:
            i_cmd = ring_ic[rd] if j >= 0 else 0.0
            i_sat = (ring_is[rd] > 0.5) if j >= 0 else False

        # --- current loop (every sample); d axis ideal, taking v_d = -p w L i first
        v_d = -pl * x[1] * i_act
        e_i = i_cmd - i_meas
        if mode == MODE_VOLTAGE:
            v_cmd = ref_a[k]
            v_dem = v_cmd
            v_sat = False
        else:
            vq_lim = math.sqrt(max(vmax * vmax - v_d * v_d, 0.0))
            ff = fp[F_KE_FF] * w_est_d
            v_dem = kp_i * e_i + integ_i + ki_i_t * e_i + ff
            v_cmd, integ_i, v_sat = _pi_step(e_i, integ_i, kp_i, ki_i_t, vq_lim, kb_i, aw, limits, ff)
        ring_v[kv] = v_cmd
        j = k - vdel                   # samples k - vdel and k - vdel - 1 sit two and one slots on
        va = ring_v[kv + 2 - lv if kv + 2 >= lv else kv + 2] if j >= 0 else 0.0
        vb = ring_v[kv + 1 if kv + 1 < lv else 0] if j >= 1 else 0.0
        v_app = (1.0 - vfrac) * va + vfrac * vb

        # --- plant over [t_k, t_k+1): inputs held, Coulomb friction with stiction
        u[0] = v_app
        u[1] = t_load[k]
        u[2] = 0.0
        u[3] = 0.0
        stuck_m = False
        stuck_l = False
        # A moving mass gets fc*sign(w) with no call: a call that passes arrays costs more
        # (their reference counts) than the rest of the sample, and a mass is moving in
        # nearly every sample.
        if fc_m > 0.0:
            if x[1] != 0.0:
                u[2] = math.copysign(fc_m, x[1])
            else:
                stuck_m, u[2] = _at_rest(x, u, ac, bc, 1, 2, fc_m)
        if compliant and fc_l > 0.0:
            if x[w_idx_l] != 0.0:
                u[3] = math.copysign(fc_l, x[w_idx_l])
            else:
                stuck_l, u[3] = _at_rest(x, u, ac, bc, w_idx_l, 3, fc_l)
        for r in range(nx):
            acc = 0.0
            for c in range(nx):
                acc += ad[r, c] * x[c]
            for c in range(4):
                acc += bd[r, c] * u[c]
            xn[r] = acc
        if fc_m > 0.0:
            if stuck_m:
                xn[1] = 0.0
                xn[2] = x[2]
            elif xn[1] * u[2] < 0.0:
                xn[1] = 0.0            # came to rest inside the step (or failed to break away): stop there
        if compliant and fc_l > 0.0:
            if stuck_l:
                xn[w_idx_l] = 0.0
                xn[th_idx_l] = x[th_idx_l]
            elif xn[w_idx_l] * u[3] < 0.0:
                xn[w_idx_l] = 0.0
        p_fric = u[2] * 0.5 * (x[1] + xn[1])
        if compliant:
            p_fric += u[3] * 0.5 * (x[w_idx_l] + xn[w_idx_l])

        # --- record the sample at t_k
        out[CH_I, k] = i_act
        out[CH_I_CMD, k] = i_cmd
        out[CH_I_MEAS, k] = i_meas
        out[CH_V_CMD, k] = v_cmd
        out[CH_V_APPLIED, k] = v_app
        out[CH_V_D, k] = v_d
        out[CH_W_M, k] = x[1]
        out[CH_TH_M, k] = x[2]
        out[CH_W_L, k] = x[w_idx_l] if compliant else x[1]
        out[CH_TH_L, k] = x[th_idx_l] if compliant else x[2]
        out[CH_W_CMD, k] = w_cmd
        out[CH_W_FB, k] = w_fb
        out[CH_TH_REF, k] = ref_a[k] if mode == MODE_POSITION else 0.0
        out[CH_TH_MEAS, k] = thq
        out[CH_E_I, k] = e_i
        out[CH_E_W, k] = e_w
        out[CH_E_P, k] = e_p
        out[CH_SAT_V, k] = 1.0 if v_sat else 0.0
        out[CH_SAT_I, k] = 1.0 if i_sat else 0.0
        out[CH_SAT_W, k] = 1.0 if pos_sat else 0.0
        out[CH_T_LOAD, k] = t_load[k]
        out[CH_V_DEMAND, k] = math.sqrt(v_dem * v_dem + v_d * v_d)
        out[CH_P_FRIC, k] = p_fric

        ok = True
        for r in range(nx):
            if not (abs(xn[r]) < 1e300):
                ok = False
        if not ok or abs(xn[0]) > fp[F_I_DIV] or abs(xn[1]) > fp[F_W_DIV]:
            return k + 1
        for r in range(nx):
            x[r] = xn[r]
        kv = kv + 1 if kv + 1 < lv else 0
        kw = kw + 1 if kw + 1 < lw else 0
        ki = ki + 1 if ki + 1 < li else 0
        ke = ke + 1 if ke + 1 < le else 0
        phase_s = phase_s + 1 if phase_s + 1 < ns else 0
        phase_p = phase_p + 1 if phase_p + 1 < nsp else 0
    return n


@njit(cache=True)
def _at_rest(x, u, ac, bc, w_idx, f_idx, fc):
    """Coulomb friction torque to hold over the next step for a mass at rest (``x[w_idx]``
    is 0), and whether it sticks; a moving mass gets fc*sign(w) in the kernel itself.

    A mass at rest sticks while the torque driving it (everything but friction) is
    within fc, and friction then cancels it exactly (Karnopp, "Computer simulation of
    stick-slip friction in mechanical dynamic systems", J. Dyn. Sys. Meas. Control,
    1985; from memory).
    """
    acc = bc[w_idx, 0] * u[0] + bc[w_idx, 1] * u[1]
    for c in range(x.shape[0]):
        acc += ac[w_idx, c] * x[c]
    inv_j = -bc[w_idx, f_idx]          # friction enters as -T/J
    drive = acc / inv_j                # torque on this mass without friction, N*m
    if abs(drive) <= fc:
        return True, drive
    return False, fc if drive > 0 else -fc
