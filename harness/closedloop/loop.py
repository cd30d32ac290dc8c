"""Closed loop: the compiled generated controller (through cffi) against the numpy plant.

Timing of one PWM period ``k``: the plant runs the period with the compare and gate
mask computed in period ``k-1``; the ADC samples at the period midpoint; the
controller's step on those counts yields the outputs applied from the start of
period ``k+1``.  A gate the controller left off does not conduct.  Start-up as in
practice: bus precharged through the rectifying body diodes to the line peak, load
connected at power-good, the controller's own soft start in between.
"""

from __future__ import annotations

import ctypes
import mmap
import sys
import time
from dataclasses import dataclass, field

import numpy as np

from codegen.build import build_project
from design.config import ConfigError
from design.contract import OUTPUT_FIELDS, PROBES, Gate, adc_fields
from design.project import Project
from plant.batch import FIELDS as PLANT_FIELDS
from plant.batch import Plant
from plant.grid import Grid
from plant.load import Load
from plant.sensor_faults import channel_names
from plant.sensors import AdcScaling, Sensors
from plant.stage import StageParams

from .scenario import Scenario

# C layout: fields aligned as the compiler aligns them (a pad byte after ``status``)
PWM_DTYPE = np.dtype([(f.name, f.dtype) for f in OUTPUT_FIELDS], align=True)
N_PROBES = len(PROBES)
# bytes of records one lane keeps per period (plant figures, outputs, internals)
RECORD_BYTES_PER_PERIOD = 8 * len(PLANT_FIELDS) + PWM_DTYPE.itemsize + 4 * N_PROBES
RECORDED = (
    "t_s",
    *PLANT_FIELDS,
    "compare",
    "gates",
    "mode",
    "faults",
    "status",
    "duty",
    "iref_A",
    "vref_V",
    "pcmd_W",
    "shoot_through",
)


def stage_params(prj: Project) -> StageParams:
    c, r = prj.config, prj.resolved
    pl = c.plant
    slow = pl.rds_on_slow
    return StageParams(
        inductance_H=r.inductance_H,
        capacitance_F=r.capacitance_F,
        inductor_dcr_ohm=pl.inductor_dcr,
        capacitor_esr_ohm=pl.capacitor_esr,
        rds_on_fast_ohm=pl.rds_on_fast,
        rds_on_slow_ohm=slow,
        dead_time_s=pl.dead_time,
        fsw_Hz=c.spec.fsw,
        period_counts=r.pwm_period_counts,
        source_resistance_ohm=pl.source_resistance,
        source_inductance_H=pl.source_inductance,
        inrush_resistance_ohm=pl.inrush_resistance,
        relay_delay_s=pl.relay_delay,
        node_capacitance_F=r.node_capacitance_F,
        slow_node_capacitance_F=r.slow_node_capacitance_F,
        slow_diode=pl.slow_leg == "diode",
        slow_qrr_C=pl.slow_diode_qrr,
        transition_time_s=pl.transition_time,
        reverse_drop_V=pl.reverse_drop,
        fast_qrr_C=pl.fast_qrr,
        # Steinmetz per period: k fsw^(alpha-1) V (B/A / 2)^beta x di^beta
        core_energy_coeff=pl.core_k
        * c.spec.fsw ** (pl.core_alpha - 1.0)
        * r.core_volume_m3
        * (0.5 * r.core_flux_per_A) ** pl.core_beta,
        core_beta=pl.core_beta,
        ac_copper_ohm=(pl.inductor_ac_factor - 1.0) * pl.inductor_dcr,
        x_capacitance_F=r.x_capacitance_F,
        dm_inductance_H=pl.dm_inductance,
        dm_resistance_ohm=pl.dm_resistance,
        dm_damping_ohm=r.dm_damping_ohm,
        edge_carrier=c.control.carrier == "edge",
    )


def adc_scaling(prj: Project) -> AdcScaling:
    r = prj.resolved
    return AdcScaling(
        r.adc_full_counts,
        r.vac_V_per_count,
        r.vac_offset_counts,
        r.il_A_per_count,
        r.il_offset_counts,
        r.vbus_V_per_count,
        r.ln_V_per_count if r.line_split else 0.0,
    )


def check_channels(prj: Project, scenarios) -> None:
    """Refuse a scenario whose sensor settings or events name channels the design lacks."""
    split = prj.resolved.line_split
    names = channel_names(split)
    for s in scenarios:
        where = s.path or s.name
        for what in ("noise_counts", "gain_error", "offset_counts"):
            got = getattr(s, what)
            if len(got) > len(names):
                raise ConfigError(
                    f"{where}: [sensors] {what} has {len(got)} entries: this design has one "
                    "bipolar line channel, so three [line, current, bus] (four are for split "
                    "line sensing)"
                )
        for ev in s.events:
            if ev.kind == "sensor" and ev.word("channel") not in names:
                raise ConfigError(
                    f"{where}: sensor event at t = {ev.t_s:g} s names channel "
                    f"{ev.word('channel')!r}: this design's channels are {', '.join(names)} "
                    f"([sensing] line = {'split' if split else 'bipolar'})"
                )


@dataclass
class RunResult:
    """Per-period records, each an array of shape (periods, n): plant figures in float64,
    controller outputs as the integers the C returns, controller internals in float32."""

    project: Project
    scenarios: list[Scenario]
    model: str
    data: dict[str, np.ndarray]
    wall_s: float
    periods: int
    extras: dict = field(default_factory=dict)

    def lane(self, k: int) -> dict[str, np.ndarray]:
        return {name: arr[:, k] for name, arr in self.data.items()}


class Progress:
    """A one-line progress bar on stderr, shown only once a run has lasted a second. The time
    left comes from the rate measured since the first update (set-up and compilation before
    it do not count) and is shown once that rate has been measured over a second."""

    def __init__(self, total: int, label: str, enabled: bool = True):
        self.total, self.label, self.enabled = total, label, enabled and total > 0
        self.tty = sys.stderr.isatty()
        self.t0 = time.perf_counter()
        self.last = 0.0
        self.shown = False
        self.first: tuple[float, int] | None = None  # (time, done) at the first update

    def eta_s(self, done: int, now: float) -> float | None:
        """Seconds left at the rate since the first update, or None while not yet known."""
        if self.first is None:
            return None
        t1, d1 = self.first
        if now - t1 < 1.0 or done <= d1:
            return None
        return (self.total - done) * (now - t1) / (done - d1)

    def update(self, done: int) -> None:
        if not self.enabled:
            return
        now = time.perf_counter()
        if self.first is None:
            self.first = (now, done)
        # redraw a terminal four times a second; elsewhere (CI logs) write a line every 10 s
        if now - self.t0 < 1.0 or now - self.last < (0.25 if self.tty else 10.0):
            return
        self.last = now
        self.shown = True
        frac = done / self.total
        eta = self.eta_s(done, now)
        left = "time left: measuring" if eta is None else f"time left {eta:5.1f} s"
        bar = "#" * int(30 * frac)
        lead, end = ("\r", "") if self.tty else ("", "\n")
        sys.stderr.write(f"{lead}{self.label} [{bar:<30}] {100 * frac:5.1f} %  {left}{end}")
        sys.stderr.flush()

    def close(self) -> None:
        if self.shown:
            lead = "\r" if self.tty else ""
            sys.stderr.write(
                f"{lead}{self.label} done in {time.perf_counter() - self.t0:.1f} s"
                + " " * 30
                + "\n"
            )


class Controllers:
    """``n`` instances of the generated controller in one cffi build."""

    def __init__(self, prj: Project, n: int, built=None):
        self.b = built or build_project(prj)
        self.p = prj.config.control.prefix
        ffi, lib = self.b.ffi, self.b.lib
        self.n = n
        self.ctrl = ffi.new(f"{self.p}_ctrl_t[{n}]")
        self.adc = ffi.new(f"{self.p}_adc_t[{n}]")
        self.pwm = ffi.new(f"{self.p}_pwm_t[{n}]")
        assert ffi.sizeof(f"{self.p}_pwm_t") == PWM_DTYPE.itemsize
        self.adc_view = np.frombuffer(ffi.buffer(self.adc), dtype=np.uint16).reshape(
            n, len(adc_fields(prj.resolved.line_split))
        )
        self.pwm_view = np.frombuffer(ffi.buffer(self.pwm), dtype=PWM_DTYPE)
        self.probe = ffi.new(f"float[{N_PROBES * n}]")
        self.probe_view = np.frombuffer(ffi.buffer(self.probe), dtype=np.float32).reshape(
            n, N_PROBES
        )
        self._batch = getattr(lib, f"{self.p}_batch_step")
        self._probe = getattr(lib, f"{self.p}_batch_probe")
        init = getattr(lib, f"{self.p}_init")
        for k in range(n):
            init(self.ctrl + k)

    def step(self, codes: np.ndarray) -> np.ndarray:
        """One period for every instance (one C call); returns a copy of the outputs."""
        self.adc_view[:] = codes
        self._batch(self.ctrl, self.adc, self.pwm, self.n)
        return self.pwm_view.copy()

    def recorder(self, pwm_rec: np.ndarray, probe_rec: np.ndarray):
        """``record(k)``: step every instance, then copy the outputs into ``pwm_rec[k + 1]``
        and the internals straight from C into ``probe_rec[k]`` (no per-period temporaries)."""
        ffi, n, batch, probe = self.b.ffi, self.n, self._batch, self._probe
        ctrl, adc, pwm = self.ctrl, self.adc, self.pwm
        dst = ffi.cast("float *", ffi.from_buffer(probe_rec))
        out_raw = self.pwm_view.view(np.uint16)
        rec_raw = pwm_rec.view(np.uint16).reshape(pwm_rec.shape[0], -1)

        def record(k: int) -> None:
            batch(ctrl, adc, pwm, n)
            rec_raw[k + 1] = out_raw
            probe(ctrl, dst + N_PROBES * n * k, n)

        return record

    def chunked(self, pwm_rec: np.ndarray, probe_rec: np.ndarray):
        """``(fn, ctx)`` for ``Plant.step``'s ``after``: the host build's ``batch_chunk`` as a
        ``ctypes`` function and the address of its context (these instances, their inputs and
        outputs, and the records that ``recorder`` fills), so that a plant stepping its lanes
        on several threads steps each chunk's controllers on the same thread."""
        ffi, lib, p = self.b.ffi, self.b.lib, self.p
        ctx = ffi.new(f"{p}_chunk_ctx_t *")
        ctx.c, ctx.adc, ctx.pwm, ctx.n = self.ctrl, self.adc, self.pwm, self.n
        ctx.pwm_rec = ffi.cast(f"{p}_pwm_t *", ffi.from_buffer(pwm_rec))
        ctx.probe_rec = ffi.cast("float *", ffi.from_buffer(probe_rec))
        self._ctx = ctx  # kept alive with the instances
        self._ctx_refs = (pwm_rec, probe_rec)
        proto = ctypes.CFUNCTYPE(
            None, ctypes.c_size_t, ctypes.c_int64, ctypes.c_uint32, ctypes.c_uint32
        )
        fn = proto(int(ffi.cast("uintptr_t", ffi.addressof(lib, f"{p}_batch_chunk"))))
        return fn, int(ffi.cast("uintptr_t", ctx))

    def internals(self) -> np.ndarray:
        """(n, N_PROBES) float32: ``design.contract.PROBES`` (duty, current reference (A), bus
        reference (V), power command (W))."""
        self._probe(self.ctrl, self.probe, self.n)
        return self.probe_view

    def state(self, k: int = 0) -> bytes:
        """The raw bytes of instance ``k``'s state (as a target's SNAPSHOT returns them)."""
        return bytes(self.b.ffi.buffer(self.ctrl + k))


def zeros_mapped(shape, dtype) -> np.ndarray:
    """A zero-filled array whose pages the OS maps in one go (Linux ``MAP_POPULATE``) rather
    than one fault at a time on first write: on virtual machines faulting a batch's records
    in page by page was measured to cost more than simulating them.  Elsewhere, or for
    small arrays, ``np.zeros``."""
    dtype = np.dtype(dtype)
    nbytes = int(np.prod(shape)) * dtype.itemsize
    populate = getattr(mmap, "MAP_POPULATE", None)
    if populate is None or nbytes < (1 << 20):
        return np.zeros(shape, dtype)
    mm = mmap.mmap(-1, nbytes, flags=mmap.MAP_PRIVATE | mmap.MAP_ANONYMOUS | populate)
    return np.frombuffer(mm, dtype=dtype).reshape(shape)


def _sensors(prj: Project, scenarios: list[Scenario]) -> Sensors:
    """The ADC of every lane, with each scenario's sensor errors (refused when they name
    channels the design lacks)."""
    check_channels(prj, scenarios)
    scaling = adc_scaling(prj)

    def per_channel(what: str) -> list:
        # N left out (three entries on a split design): the line's noise, no gain or offset error
        vals = [getattr(s, what) for s in scenarios]
        fill = (lambda v: v[0]) if what == "noise_counts" else (lambda v: 0.0)
        return [
            np.array([v[ch] if ch < len(v) else fill(v) for v in vals])
            for ch in range(scaling.channels)
        ]

    return Sensors(
        scaling,
        len(scenarios),
        seed=[s.seed for s in scenarios],
        gain_err=per_channel("gain_error"),
        offset_err=per_channel("offset_counts"),
        noise=per_channel("noise_counts"),
    )


def run(
    prj: Project,
    scenarios: list[Scenario],
    model: str = "switching",
    progress: bool = True,
    built=None,
    controllers=None,
    perturb=None,
) -> RunResult:
    """Run all ``scenarios`` in lockstep (one lane each) for the longest duration.

    ``controllers``: something with ``step(codes) -> outputs`` and ``internals()`` in place
    of the in-process build (a controller on a target, over the link). ``perturb(k, codes)``:
    called each period after the ADC, before the controller steps, to change the codes of
    shape (lanes, channels) in place (a signal injected at a loop's feedback point)."""
    if model not in ("switching", "averaged"):
        raise ValueError(f"model must be 'switching' or 'averaged', not {model!r}")
    n = len(scenarios)
    sp = stage_params(prj)
    T = sp.period_s
    spec = prj.config.spec
    periods = int(round(max(s.duration_s for s in scenarios) / T))
    grid = Grid(
        n,
        [s.vrms_V for s in scenarios],
        [s.freq_Hz for s in scenarios],
        [s.phase_deg for s in scenarios],
        dc_V=[s.dc_V for s in scenarios],
        harmonics_per_lane=[s.harmonics for s in scenarios],
    )
    # the downstream converter stops at its minimum input, the level its hold-up was sized for
    load = Load(
        n,
        [s.load_kind for s in scenarios],
        [s.load_power_W for s in scenarios],
        spec.vout,
        uvlo_V=spec.vout_min_holdup,
    )
    sens = _sensors(prj, scenarios)
    scaling = sens.s
    # precharge: the body diodes rectify the line into the bus before any switching
    vpk = np.sqrt(2.0) * np.array([s.vrms_V for s in scenarios]) * 0.98
    plant = Plant(sp, grid, load, sens, 0.0, vpk)
    ctl = controllers if controllers is not None else Controllers(prj, n, built)
    local = isinstance(ctl, Controllers)
    # the controller's outputs of period k are the plant's inputs in period k + 1: the plant
    # reads them where the controller leaves them (in-process: the C structs themselves)
    pwm = ctl.pwm_view if local else np.zeros(n, dtype=PWM_DTYPE)
    codes = ctl.adc_view if local else np.zeros((n, scaling.channels), dtype=np.uint16)
    compare, gates, relay = pwm["compare"], pwm["gates"], pwm["status"]

    events = [list(s.events) for s in scenarios]
    next_t = [ev[0].t_s if ev else np.inf for ev in events]
    next_min = min(next_t)

    t_alloc = time.perf_counter()
    plant_rec = zeros_mapped((periods, n, len(PLANT_FIELDS)), np.float64)
    pwm_rec = zeros_mapped((periods + 1, n), PWM_DTYPE)  # row k + 1: the outputs of period k
    probe_rec = zeros_mapped((periods, n, N_PROBES), np.float32)
    bar = Progress(periods, f"run {model} x{n}", progress)
    aborted = None
    clock = time.perf_counter
    stamps = np.zeros(periods + 1)  # wall clock at the start of each period (s), for `pfcrig bench`
    after, record = _controller_hooks(ctl, plant, perturb, pwm, codes, pwm_rec, probe_rec)
    t0 = clock()
    alloc_s = t0 - t_alloc  # mapping the records: a cost per period too, paid up front
    for k in range(periods):
        stamps[k] = clock()
        t = k * T
        if t >= next_min:
            next_min = _due_events(plant, events, next_t, t)
        plant.step(k, compare, gates, plant_rec[k], model, codes, relay, after)
        if perturb is not None:
            perturb(k, codes)
        if record is not None:
            try:
                record(k)
            except (RuntimeError, TimeoutError) as exc:  # a target over a link stopped answering
                aborted = f"stopped at period {k} (t = {t:.6f} s): {exc}"
                periods = k
                break
        bar.update(k + 1)
    stamps[periods] = clock()
    bar.close()
    # views, no copies: a batch's records are large, and fresh memory is slow to fault in
    rec = {name: plant_rec[:periods, :, f] for f, name in enumerate(PLANT_FIELDS)}
    rec["t_s"] = np.broadcast_to((np.arange(periods) * T)[:, None], (periods, n))
    outputs, applied = (
        pwm_rec[1 : periods + 1],
        pwm_rec[:periods],
    )  # the plant ran period k with outputs k - 1
    rec["mode"], rec["faults"], rec["status"] = (
        outputs["mode"],
        outputs["faults"],
        outputs["status"],
    )
    rec["compare"], rec["gates"] = applied["compare"], applied["gates"]
    rec["shoot_through"] = ((applied["gates"] & Gate.SLOW_LO) != 0) & (
        (applied["gates"] & Gate.SLOW_HI) != 0
    )
    for f, (name, _, _) in enumerate(PROBES):
        rec[name] = probe_rec[:periods, :, f]  # float32, as the controller computes them
    result = RunResult(
        prj, scenarios, model, {name: rec[name] for name in RECORDED}, clock() - t0, periods
    )
    result.extras["period_wall_s"] = stamps[: periods + 1] - t0
    result.extras["record_alloc_s"] = alloc_s
    if local:
        result.extras["final_states"] = [ctl.state(k) for k in range(n)]
    if aborted:
        result.extras["aborted"] = aborted
    return result


def _controller_hooks(ctl, plant: Plant, perturb, pwm, codes, pwm_rec, probe_rec):
    """``(after, record)``: how the controllers step after the plant's period ``k`` and keep
    their outputs (row k + 1 of ``pwm_rec``) and internals (row k of ``probe_rec``).  In
    process, on a batch the plant splits over threads and with nothing to change the codes in
    between: ``after`` for ``Plant.step``, each chunk's controllers on its thread; otherwise
    ``record(k)``, called once the plant is done (for controllers elsewhere, a target over a
    link: ``step(codes)`` and ``internals()``)."""
    if not isinstance(ctl, Controllers):

        def record(k: int) -> None:
            pwm[:] = ctl.step(codes)
            pwm_rec[k + 1] = pwm
            probe_rec[k] = ctl.internals()

        return None, record
    if perturb is None and plant.bounds is not None:
        return ctl.chunked(pwm_rec, probe_rec), None
    return None, ctl.recorder(pwm_rec, probe_rec)


def _due_events(plant: Plant, events: list[list], next_t: list[float], t: float) -> float:
    """Apply every lane's events due by run time ``t`` (s); returns the time of the next."""
    for j, evs in enumerate(events):
        while evs and evs[0].t_s <= t:
            _apply(plant, j, evs.pop(0), t)
        next_t[j] = evs[0].t_s if evs else np.inf
    return min(next_t)


def _apply(plant: Plant, j: int, ev, t: float) -> None:
    """A scenario event on lane ``j`` at run time ``t`` (s)."""
    if ev.kind == "dip":
        plant.dip(j, ev.get("residual"), t + ev.get("cycles") / plant.freq[j])
    elif ev.kind == "load":
        plant.set_load_power(j, ev.get("power"))
    elif ev.kind == "freq":
        plant.set_freq(j, ev.get("hz"))
    elif ev.kind == "phase_jump":
        plant.phase_jump(j, ev.get("deg"))
    elif ev.kind == "vrms":
        plant.set_vrms(j, ev.get("vrms"))
    elif ev.kind == "sensor":
        fault = ev.word("fault")
        if fault == "glitch":
            until = t + (ev.get("periods") - 0.5) * plant.p.period_s
        else:
            until = t + ev.get("duration", float("inf"))
        value = ev.get("value", 0.0) if fault == "gain" else ev.get("value_counts", 0.0)
        names = channel_names(plant.channels == 4)
        plant.sensor_fault(j, names.index(ev.word("channel")), fault, value, until)
