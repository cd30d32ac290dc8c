"""``n`` scenarios of the whole plant in lockstep: grid source, power stage, load and ADC.

The state and every per-lane setting live in a few numpy arrays that the compiled kernel
(``plant.kernel``) steps one PWM period at a time, lane by lane, so one call advances the
whole batch and one lane's numbers never depend on the others.  Events (dips, load steps,
frequency steps, phase jumps, line voltage changes) change a lane's settings between
periods.  Nothing here knows what computes the compare values and gate masks.
"""

from __future__ import annotations

import math

import numpy as np

from design.contract import timing
from design.filter import MIN_L_SRC, system

from . import filt
from . import kernel as K
from . import layout as LY
from .grid import Grid
from .linear import plan
from .load import Load
from .sensor_faults import SensorFaults
from .sensors import Sensors
from .stage import StageParams

FIELDS = LY.FIELDS


def stage_par(p: StageParams, load: Load) -> np.ndarray:
    """The kernel's parameter vector (SI units) for the stage and the load; the ADC entries
    are unit scales until ``Sensors.pack`` fills them."""
    par = np.zeros(LY.PAR_ROWS)
    par[LY.P_LT], par[LY.P_C], par[LY.P_ESR] = p.l_total_H, p.capacitance_F, p.capacitor_esr_ohm
    par[LY.P_RTOT], par[LY.P_RINRUSH], par[LY.P_TDEAD] = (
        p.r_total_ohm,
        p.inrush_resistance_ohm,
        p.dead_time_s,
    )
    par[LY.P_T], par[LY.P_COUNTS] = p.period_s, p.period_counts
    par[LY.P_EDGE] = 1.0 if p.edge_carrier else 0.0
    par[LY.P_RSRC], par[LY.P_LSRC] = p.source_resistance_ohm, p.source_inductance_H
    par[LY.P_RELAY_DELAY] = p.relay_delay_s
    par[LY.P_VOUT], par[LY.P_CONNECT], par[LY.P_UVLO] = load.vout, load.connect_V, load.uvlo_V
    par[LY.P_FULL] = 65535.0
    par[LY.P_VAC_CPV] = par[LY.P_IL_CPA] = par[LY.P_VBUS_CPV] = 1.0
    par[LY.P_CNODE], par[LY.P_TTR], par[LY.P_VREV] = (
        p.node_capacitance_F,
        p.transition_time_s,
        p.reverse_drop_V,
    )
    par[LY.P_CSLOW] = p.slow_node_capacitance_F
    par[LY.P_QRRF] = p.fast_qrr_C
    par[LY.P_SDIODE] = 1.0 if p.slow_diode else 0.0
    par[LY.P_QRR] = p.slow_qrr_C if p.slow_diode else 0.0
    par[LY.P_CORE_C], par[LY.P_CORE_BETA] = p.core_energy_coeff, p.core_beta
    par[LY.P_ACX] = p.ac_copper_ohm / 12.0  # the triangle's mean square: di^2/12
    if p.filtered:
        a, b_v, b_i = system(
            p.source_inductance_H,
            p.source_resistance_ohm,
            p.dm_inductance_H,
            p.dm_resistance_ohm,
            p.dm_damping_ohm,
            p.x_capacitance_F,
        )
        phi, g_v, g_s, g_i = filt.discretise(a, b_v, b_i, p.period_s)
        par[LY.P_FILT] = 1.0
        par[LY.P_FRS], par[LY.P_FRM], par[LY.P_FRD] = (
            p.source_resistance_ohm,
            p.dm_resistance_ohm,
            p.dm_damping_ohm,
        )
        par[LY.P_FLS], par[LY.P_FLM], par[LY.P_FCX] = (
            max(p.source_inductance_H, MIN_L_SRC),
            p.dm_inductance_H,
            p.x_capacitance_F,
        )
        par[LY.P_FPHI : LY.P_FPHI + 9] = phi.ravel()
        par[LY.P_FGV : LY.P_FGV + 3] = g_v
        par[LY.P_FGS : LY.P_FGS + 3] = g_s
        par[LY.P_FGI : LY.P_FGI + 3] = g_i
    return par


def step_plans(p: StageParams, g_max_S: float) -> np.ndarray:
    """(pieces, order) of the exact solver for [relay closed/open][half period, dead time,
    whole period]: fixed by the parameters, so that no lane's result depends on the others.
    The bound on ``|A| t`` is taken in the scaled state (i sqrt(L), v sqrt(C)), where the
    matrix norm is at most R/L + 1/sqrt(LC) + G/C + ESR/L."""
    L, C = p.l_total_H, p.capacitance_F
    base = 1.0 / math.sqrt(L * C) + g_max_S / C + p.capacitor_esr_ohm / L
    rates = ((p.r_total_ohm / L + base), ((p.r_total_ohm + p.inrush_resistance_ohm) / L + base))
    spans = {
        LY.PLAN_HALF: p.period_s / 2.0,
        LY.PLAN_DEAD: p.dead_time_s,
        LY.PLAN_PERIOD: p.period_s,
    }
    plans = np.zeros((2, 3, 2), dtype=np.int64)
    for relay, rate in enumerate(rates):
        for kind, span in spans.items():
            plans[relay, kind] = plan(rate * span)
    return plans


PARALLEL_MIN_LANES = 32  # below this a batch runs on one thread (the fork and join cost more)


def chunks(n: int):
    """The lane bounds of a batch split over numba's threads, and a scratch space per chunk;
    ``(None, None)`` for one thread or a small batch."""
    threads = K.threads()
    if threads < 2 or n < PARALLEL_MIN_LANES:
        return None, None
    bounds = np.linspace(0, n, threads + 1).round().astype(np.int64)
    width = int(np.diff(bounds).max())
    return bounds, np.stack([LY.workspace(width) for _ in range(threads)])


class Plant:
    """Grid, stage, load and ADC for ``n`` lanes; ``i0_A``/``vc0_V`` scalars or (n,)."""

    def __init__(
        self,
        p: StageParams,
        grid: Grid,
        load: Load,
        sensors: Sensors | None = None,
        i0_A=0.0,
        vc0_V=0.0,
        g_max_S: float = 1.0,
    ):
        """``g_max_S``: the largest load conductance the run will see (bounds the exact
        solver's step, see ``step_plans``)."""
        t = timing("edge" if p.edge_carrier else "centre")
        if t["update"] != "period start":
            raise NotImplementedError(f"the plant's period kernel does not simulate {t}")
        n = grid.n
        self.p, self.n = p, n
        self.T = p.period_s  # s
        self.par = stage_par(p, load)
        self.plans = step_plans(p, g_max_S)
        lane = np.zeros(
            (n, LY.LANE_ROWS)
        )  # a lane's numbers side by side (``plant.kernel`` columns)
        lane[:, LY.L_I] = i0_A
        lane[:, LY.L_VC] = vc0_V
        # the inrush limiter's bypass relay: open at power-up (the bus precharged through the
        # limiter); it follows the controller's command after the contact time
        lane[:, LY.L_BYPASSED] = 0.0
        lane[:, LY.L_RELAY_CMD] = 0.0
        lane[:, LY.L_RELAY_T] = -np.inf
        lane[:, LY.L_THETA], lane[:, LY.L_VRMS], lane[:, LY.L_FREQ] = (
            grid.theta,
            grid.vrms,
            grid.freq,
        )
        lane[:, LY.L_DC] = grid.dc
        lane[:, LY.L_S0], lane[:, LY.L_C0] = np.sin(grid.theta), np.cos(grid.theta)
        lane[:, LY.L_DIP_END] = -np.inf
        lane[:, LY.L_DIP_LEVEL] = 1.0
        lane[:, LY.L_POWER], lane[:, LY.L_CP] = load.power, load.constant_power
        # the filter in its line-frequency steady state with no stage current (its
        # capacitors' charging current)
        vpk = LY.SQRT2 * np.asarray(grid.vrms, dtype=float)
        lane[:, LY.L_FVX] = vpk * np.sin(grid.theta) + grid.dc
        i_x = p.x_capacitance_F * LY.TWO_PI * np.asarray(grid.freq) * vpk * np.cos(grid.theta)
        lane[:, LY.L_FIS] = lane[:, LY.L_FIM] = i_x
        lane[:, LY.L_FISTG] = 0.0
        if sensors is not None:
            sensors.pack(self.par, lane)
            self.seed = sensors.seed.copy()
        else:
            self.seed = np.zeros(n, dtype=np.uint64)
        self.lane = lane
        self.harm = grid.harm
        self.channels = 3 if sensors is None else sensors.s.channels
        self.codes = np.zeros((n, self.channels), dtype=np.uint16)
        self.no_relay = np.zeros(n, dtype=np.uint8)
        self.ws = LY.workspace(n)
        self.bounds, self.wss = chunks(n)
        self.failed = SensorFaults(
            n,
            sensors.s.zero_counts
            if sensors is not None
            else (self.par[LY.P_VAC_OFF], self.par[LY.P_IL_OFF], 0.0),
            int(self.par[LY.P_FULL]),
        )

    # -- state ---------------------------------------------------------------------------
    @property
    def i(self) -> np.ndarray:
        """Inductor (= line) current, A."""
        return self.lane[:, LY.L_I]

    @property
    def vc(self) -> np.ndarray:
        """Bus capacitor voltage, V."""
        return self.lane[:, LY.L_VC]

    @property
    def vrms(self) -> np.ndarray:
        return self.lane[:, LY.L_VRMS]

    @property
    def freq(self) -> np.ndarray:
        return self.lane[:, LY.L_FREQ]

    # -- events --------------------------------------------------------------------------
    def dip(self, j: int, residual: float, until_s: float) -> None:
        """Line of lane ``j`` at ``residual`` of its amplitude until ``until_s`` (s, run time)."""
        self.lane[j, LY.L_DIP_LEVEL], self.lane[j, LY.L_DIP_END] = residual, until_s

    def set_load_power(self, j: int, power_W: float) -> None:
        self.lane[j, LY.L_POWER] = power_W

    def set_freq(self, j: int, freq_Hz: float) -> None:
        self.lane[j, LY.L_FREQ] = freq_Hz

    def phase_jump(self, j: int, deg: float) -> None:
        th = self.lane[j, LY.L_THETA] + math.radians(deg)
        self.lane[j, LY.L_THETA], self.lane[j, LY.L_S0], self.lane[j, LY.L_C0] = (
            th,
            math.sin(th),
            math.cos(th),
        )

    def set_vrms(self, j: int, vrms_V: float) -> None:
        self.lane[j, LY.L_VRMS] = vrms_V

    def sensor_fault(self, j: int, ch: int, fault: str, value: float, until_s: float) -> None:
        """Lane ``j``'s ADC channel ``ch`` fails (``plant.sensor_faults``) until ``until_s``."""
        self.failed.set(j, ch, fault, value, until_s)

    # -- one period ----------------------------------------------------------------------
    def step(
        self,
        k: int,
        compare,
        gates,
        out: np.ndarray,
        model: str = "switching",
        codes=None,
        relay=None,
        after=None,
    ) -> np.ndarray:
        """Advance every lane through period ``k`` (starting at ``k T``) with ``compare``
        (timer counts), ``gates`` (bit masks) and ``relay`` (the bypass relay's command, bit 0
        set: close; default open), arrays of shape (n,); the period's records go into ``out``
        (n, len(FIELDS)); returns the ADC codes sampled in it, (n, channels) uint16 (into
        ``codes`` when given; 4 channels with split line sensing).

        ``after``: ``(fn, ctx)``, a compiled function ``fn(ctx, k, first, end)`` of C
        signature void(uintptr_t, int64_t, uint32_t, uint32_t) (a ``ctypes`` function) called
        once the codes of lanes ``first..end-1`` are final: on a batch split over threads
        (``chunks``), on each chunk's thread as soon as its lanes are done; otherwise once,
        for all lanes, after the sensor faults have changed the codes."""
        codes = self.codes if codes is None else codes
        relay = self.no_relay if relay is None else relay
        t = k * self.T
        kind = LY.MODEL_SWITCHING if model == "switching" else LY.MODEL_AVERAGED
        par, plans, lane, harm, seed = self.par, self.plans, self.lane, self.harm, self.seed
        if self.bounds is None:
            K.step_lanes(
                par, plans, lane, harm, seed, k, t, kind, compare, gates, relay, codes, out,
                self.ws,
            )  # fmt: skip
        elif after is None or self.failed.active:
            K.step_chunks(
                par, plans, lane, harm, seed, k, t, kind, compare, gates, relay, codes, out,
                self.wss, self.bounds,
            )  # fmt: skip
        else:  # no sensor fault active: the codes are final as the kernel writes them
            K.step_chunks_then(
                par, plans, lane, harm, seed, k, t, kind, compare, gates, relay, codes, out,
                self.wss, self.bounds, after[0], after[1],
            )  # fmt: skip
            return codes
        self.failed.apply(t, codes)
        if after is not None:
            after[0](after[1], k, 0, self.n)
        return codes
