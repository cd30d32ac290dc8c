"""Power at the stage's terminals and its losses by kind, over a window of periods.

From the plant's per-period records (``plant.layout.FIELDS``): the energy in at the stage's
input terminals ``e_term_J`` (after the grid's impedance, before the input filter), the
source's ``e_in_J`` into the stage proper, the current's ``i2_A2s`` = int i^2, the capacitor's
ESR loss ``e_esr_J``, the load's energy ``e_out_J``, the series-path loss ``e_loss_J`` (every
resistor the stage's current crosses), the filter's loss ``e_filt_J`` and stored energy
``e_fstore_J``, the capacitor voltage ``vc_V`` and current ``i_end_A`` at each period's end:

    p_in   = sum(e_term) / T_w                               at the stage's input terminals
    losses = conduction (Rds_on of both legs) + switching + deadtime (``plant.losses``)
             + inductor_copper (DCR, and the AC resistance on the ripple) + inductor_core
             + capacitor (ESR) + inrush (the limiter while its relay is open)
             + filter (the DM winding and its damper, ``plant.filt``)
    p_in - p_out - dE(C, L, filter)/T_w = sum(losses)          (energy balance, checked)

The switching, dead-time, core and AC copper energies are the plant's own records of what it
took out of the bus each period (``e_sw_J``, ``e_dt_J``, ``e_core_J``, ``e_acu_J``).  Without
an input filter (``[plant] x_capacitance = 0``) the terminals' energy is the source's less the
grid impedance's loss and stored change, and there is no filter loss.
"""

from __future__ import annotations

import numpy as np

from design.project import Project

NOT_MODELLED: tuple[str, ...] = ()


def power_balance(d: dict[str, np.ndarray], prj: Project, sl: slice) -> dict:
    """p_in_W (terminals), p_source_W (into the stage after the filter), p_out_W, efficiency
    = p_out/p_in, losses_W by kind, the stored-energy change as a power and the balance's
    residual, over periods ``sl``."""
    pl, r, fs = prj.config.plant, prj.resolved, prj.config.spec.fsw
    k0, k1 = sl.start, sl.stop
    tw = (k1 - k0) / fs
    i2 = float(np.sum(d["i2_A2s"][sl]))
    i_a = float(d["i_end_A"][k0 - 1]) if k0 > 0 else 0.0
    i_b = float(d["i_end_A"][k1 - 1])
    vc_a = float(d["vc_V"][k0 - 1]) if k0 > 0 else float(d["vc_V"][k0])
    vc_b = float(d["vc_V"][k1 - 1])
    e_src = float(np.sum(d["e_in_J"][sl]))
    e_term = float(np.sum(d["e_term_J"][sl]))
    filtered = r.x_capacitance_F > 0.0
    r_series = pl.inductor_dcr + pl.rds_on_fast + pl.rds_on_slow
    if not filtered:
        r_series += pl.source_resistance
    f_a = float(d["e_fstore_J"][k0 - 1]) if k0 > 0 else float(d["e_fstore_J"][k0])
    f_b = float(d["e_fstore_J"][k1 - 1])

    def total(key: str) -> float:
        return float(np.sum(d[key][sl])) / tw

    losses = {
        "conduction": (pl.rds_on_fast + pl.rds_on_slow) * i2 / tw,
        "switching": total("e_sw_J"),
        "deadtime": total("e_dt_J"),
        "inductor_copper": pl.inductor_dcr * i2 / tw + total("e_acu_J"),
        "inductor_core": total("e_core_J"),
        "capacitor": total("e_esr_J"),
        "inrush": max(float(np.sum(d["e_loss_J"][sl])) - r_series * i2, 0.0) / tw,
        "filter": total("e_filt_J"),
    }
    stored = (
        0.5 * r.capacitance_F * (vc_b**2 - vc_a**2)
        + 0.5 * r.inductance_H * (i_b**2 - i_a**2)
        + (f_b - f_a)
    ) / tw
    p_in, p_out = e_term / tw, float(np.sum(d["e_out_J"][sl])) / tw
    return {
        "p_in_W": p_in,
        "p_source_W": e_src / tw,
        "p_out_W": p_out,
        "efficiency": p_out / p_in if p_in > 0 else None,
        "losses_W": losses,
        "losses_not_modelled": list(NOT_MODELLED),
        "stored_change_W": stored,
        "balance_residual_W": p_in - p_out - stored - sum(losses.values()),
    }
