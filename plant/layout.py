"""Layout of the kernels' arrays: the per-lane state columns (``lane``), the parameter
vector (``par``), the record fields (``out``), the switching period's workspace rows (``ws``)
and a few codes shared with the harness-side ``plant.batch``.  Chosen for speed (measured by
``pfcrig bench``)."""

from __future__ import annotations

import math

import numpy as np

from design.contract import Gate

SQRT2 = math.sqrt(2.0)
TWO_PI = 2.0 * math.pi

# columns of the per-lane float state (``lane`` array, shape (n, LANE_ROWS): a lane's numbers
# side by side)
(
    L_I,
    L_VC,
    L_BYPASSED,
    L_CONNECTED,
    L_THETA,
    L_VRMS,
    L_FREQ,
    L_DC,
    L_DIP_END,
    L_DIP_LEVEL,
    L_POWER,
    L_CP,
    L_GAIN0,
    L_GAIN1,
    L_GAIN2,
    L_GAIN3,
    L_OFF0,
    L_OFF1,
    L_OFF2,
    L_OFF3,
    L_NOISE0,
    L_NOISE1,
    L_NOISE2,
    L_NOISE3,
    L_S0,
    L_C0,
    L_RELAY_CMD,
    L_RELAY_T,
    L_FIS,
    L_FIM,
    L_FVX,
    L_FISTG,
    L_SN,
) = range(33)
# L_S0, L_C0: sin and cos of L_THETA, carried along by rotation; L_RELAY_CMD, L_RELAY_T: the
# relay's last command (1 close) and when it changed (s); *3: the N channel of split sensing;
# L_FIS, L_FIM, L_FVX: the input filter's line current, DM inductor current and X capacitor
# voltage (``plant.filt``); L_FISTG: the stage's period-average current of the last period;
# L_SN: the slow leg's midpoint as a fraction of the bus (0: minus rail, 1: plus rail; between
# while its node capacitance swings, ``plant.solver.swing``)
LANE_ROWS = 33

# entries of the parameter vector (``par``)
(
    P_LT,
    P_C,
    P_ESR,
    P_RTOT,
    P_RINRUSH,
    P_TDEAD,
    P_T,
    P_COUNTS,
    P_RSRC,
    P_LSRC,
    P_RELAY_DELAY,
    P_VOUT,
    P_CONNECT,
    P_UVLO,
    P_FULL,
    P_VAC_CPV,
    P_VAC_OFF,
    P_IL_CPA,
    P_IL_OFF,
    P_VBUS_CPV,
    P_CNODE,
    P_TTR,
    P_VREV,
    P_CORE_C,
    P_CORE_BETA,
    P_ACX,
    P_LN_CPV,
    P_FILT,
    P_FRS,
    P_FRM,
    P_FRD,
    P_FLS,
    P_FLM,
    P_FCX,
    P_EDGE,
    P_CSLOW,
    P_SDIODE,
    P_QRR,
    P_QRRF,
    P_FPHI,
) = range(40)  # CPV/CPA: counts per V/A; P_CNODE..P_ACX: the loss model (``plant.losses``);
# P_LN_CPV: split line sensing's L and N channels, counts per V (0: one bipolar line channel);
# P_FILT (1: an input filter, ``plant.filt``) .. P_FCX: its flag and elements; P_EDGE: 1 for
# the edge-aligned carrier (0: centre-aligned, ``design.contract.TIMINGS``); P_CSLOW: the slow
# leg's node capacitance (F, 0: its midpoint moves at once), P_SDIODE: 1 for a slow leg of
# diodes, P_QRR: their reverse-recovery charge (C); P_QRRF: the fast leg's body-diode
# reverse-recovery charge at a hard turn-on (C); from P_FPHI: the filter's
# period map Phi (3 x 3, row-major), then g_v, g_slope, g_i (3 each)
P_FGV, P_FGS, P_FGI = P_FPHI + 9, P_FPHI + 12, P_FPHI + 15
PAR_ROWS = P_FPHI + 18

# plant records per period (columns of ``out``, shape (n, len(FIELDS))), in this order
FIELDS = (
    "vs_V",
    "vterm_V",
    "i_avg_A",
    "i_max_A",
    "i_min_A",
    "i_sample_A",
    "vbus_V",
    "vbus_sample_V",
    "e_in_J",
    "e_out_J",
    "e_loss_J",
    "i2_A2s",
    "e_esr_J",
    "vc_V",
    "i_end_A",
    "e_sw_J",
    "e_dt_J",
    "e_core_J",
    "e_acu_J",
    "i_line_A",
    "e_term_J",
    "e_filt_J",
    "e_fstore_J",
)
(
    R_VS,
    R_VTERM,
    R_IAVG,
    R_IMAX,
    R_IMIN,
    R_ISAMPLE,
    R_VBUS,
    R_VBSAMPLE,
    R_EIN,
    R_EOUT,
    R_ELOSS,
    R_I2,
    R_EESR,
    R_VC,
    R_IEND,
    R_ESW,
    R_EDT,
    R_ECORE,
    R_EACU,
    R_ILINE,
    R_ETERM,
    R_EFILT,
    R_EFSTORE,
) = range(len(FIELDS))
# R_ILINE: the grid current's period average (the stage's own current without a filter);
# R_ETERM: energy in at the stage's input terminals (after the grid's impedance); R_EFILT: the
# filter's resistive loss; R_EFSTORE: the filter's stored energy at the period's end

# gate bits of the controller contract, as plain ints (compile-time constants of the kernels)
GATE_FAST_LO, GATE_FAST_HI, GATE_SLOW_LO, GATE_SLOW_HI = (int(g) for g in Gate)
MODEL_SWITCHING, MODEL_AVERAGED = 0, 1
# step plans: plans[relay open (0/1), kind, 0 pieces / 1 order]; kinds:
PLAN_HALF, PLAN_DEAD, PLAN_PERIOD = 0, 1, 2


# -- one period of every lane ----------------------------------------------------------------
# rows of the workspace ``ws`` (shape (WS_ROWS, >= n)): per-lane numbers of the present period,
# a row per quantity so that the solver's loops run over lanes; see ``workspace`` for its row length
(
    W_G,
    W_ICP,
    W_K,
    W_A22,
    W_B2,
    W_RPATH,
    W_SLOW,
    W_SCALE,
    W_I,
    W_VC,
    W_X1,
    W_X2,
    W_M,
    W_MPREV,
    W_A11,
    W_A12,
    W_A21,
    W_B1,
    W_V1,
    W_V2,
    W_Y1,
    W_Y2,
    W_P11,
    W_P12,
    W_P21,
    W_P22,
    W_H,
    W_Q,
    W_Q2,
    W_EIN,
    W_VB,
    W_IMAX,
    W_IMIN,
    W_ISTART,
    W_IS,
    W_VBS,
    W_VSH,
    W_QM,
    W_QM2,
    W_EDT,
    W_B2LATE,
    W_GLO,
    W_GHI,
    W_VXH,
    W_VG0,
    W_VG1,
    W_SAMP,
    W_SN,
    W_ESLOW,
    W_SFREE,
    W_DT,
    W_VS,
    W_MP,
    W_MN,
    W_NOSW,
    W_ISEG,
) = (*range(50), 50, 57, 64, 71, 78, 85)  # the last six: 7 rows each (one per sub-interval)
# W_VXH: the stage's input voltage at T/2 (the X capacitor's with a filter); W_VG0, W_VG1:
# the grid source at the period's start and end; W_SAMP: the sub-interval after which the ADC
# samples (by the carrier, ``plant.kernel``); W_SN: the slow leg's midpoint (``L_SN``); W_ESLOW:
# the period's hard switching of the slow leg's node capacitance (J); W_SFREE: 1 while neither
# slow device is switched on (its midpoint moves with the current)
WS_ROWS = 92
THIRD = 1.0 / 3.0
TWELFTH = 1.0 / 12.0


def workspace(n: int) -> np.ndarray:
    """Scratch space for ``step_lanes``: rows of a length whose byte stride is an odd number
    of cache lines, so that the same lane's entries in the many rows do not all fall into the
    same few cache sets (a power-of-two stride made every store a conflict miss)."""
    cols = 8 * ((n + 7) // 8)
    if (cols // 8) % 2 == 0:
        cols += 8
    return np.zeros((WS_ROWS, cols))
