"""Polarity, RMS, current reference and PWM assignment blocks through the compiled C."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from .helpers import GHI, GLO, LEGAL_GATES, SHI, SLO, consts

FSW = 65000.0  # the demo config's switching (and control) frequency


def wave(amp, f, phase, n, dc=0.0, harm=(), noise=0.0, seed=0):
    t = np.arange(n) / FSW
    th = 2 * np.pi * f * t + phase
    v = np.sin(th)
    for k, a in harm:
        v = v + a * np.sin(k * th)
    v = amp * v + dc
    clean = v.copy()
    if noise:
        v = v + np.random.default_rng(seed).normal(0.0, noise, n)
    return t, clean, v


def run_polarity(b, v):
    ffi, lib = b.ffi, b.lib
    s = ffi.new("pfc_polarity_t*")
    lib.pfc_polarity_init(s)
    flips, freq, pols = [], [], []
    for k, x in enumerate(v):
        before = s.pol
        lib.pfc_polarity_step(s, float(x))
        if s.zc and before != 0:  # a change, not the first acquisition from "unknown"
            flips.append(k)
            freq.append(s.freq_millihz / 1000.0)
        pols.append(s.pol)
    return np.array(flips), np.array(freq), np.array(pols), s


def test_polarity_changes_when_the_reading_rests_on_the_band_edge(demo_project, demo_built):
    """A coarse line scale can hold the reading at exactly the hysteresis for a few periods on
    its way out of the band (a low-line design at 174 kHz read one code for three periods).
    That reading is not yet a candidate of the new sign, and it must not count as out of the
    band either, or the line looks to have left the band too long before the candidate and
    the polarity never changes. A 50 Hz line whose samples rest on +-hysteresis for 4 periods
    after each crossing changes polarity once per half."""
    c = consts(demo_project)
    hyst = c["ZC_HYST_V"]
    _, line, _ = wave(325.0, 50.0, 0.3, int(0.2 * FSW))
    v = line.copy()
    out = (np.abs(line[1:]) > hyst) & (np.abs(line[:-1]) <= hyst)  # leaving the band
    for k in np.nonzero(out)[0] + 1:
        v[k : k + 4] = math.copysign(hyst, line[k])  # rest on its edge for 4 periods
    flips, _, pols, _ = run_polarity(demo_built, v)
    crossings = np.count_nonzero(np.diff(np.sign(v)) != 0)
    assert len(flips) >= crossings - 1 >= 18
    assert np.all(np.diff(flips) > 0.8 * FSW / 100)  # one change per half, none in between


@settings(max_examples=25, deadline=None)
@given(
    amp=st.floats(60.0, 400.0),
    f=st.floats(45.0, 66.0),
    phase=st.floats(0, 2 * math.pi),
    noise_frac=st.floats(0.0, 1.0),
    dc_frac=st.floats(-0.02, 0.02),
)
@example(
    amp=60.0, f=58.0, phase=0.0, noise_frac=1.0, dc_frac=0.0
)  # found once: a one-period estimate was 0.56 % off
def test_polarity_one_change_per_half_and_frequency(
    demo_project, demo_built, amp, f, phase, noise_frac, dc_frac
):
    c = consts(demo_project)
    hyst = c["ZC_HYST_V"]
    sigma = (
        noise_frac * hyst / 5.0
    )  # stated bound: noise rms up to a fifth of the hysteresis half-band
    dc = dc_frac * amp
    cycles = 6
    n = int(cycles * FSW / f)
    t, clean, v = wave(amp, f, phase, n, dc=dc, noise=sigma, seed=1)
    flips, freq, pols, _ = run_polarity(demo_built, v)
    # zero crossings of the (offset) clean wave, in samples
    zc = np.nonzero(np.sign(clean[1:]) != np.sign(clean[:-1]))[0] + 1
    acquired = int(np.argmax(pols != 0))
    zc = zc[zc > acquired]  # crossings after the polarity was first known
    # no chatter: flips are at least 0.4 half period apart
    half = FSW / (2 * f)
    assert np.all(np.diff(flips) > 0.4 * half)
    # each clean crossing (with time left to detect it) is followed by exactly one flip
    slope = 2 * np.pi * f * amp  # V/s at the crossing
    late = (hyst + 4 * sigma + abs(dc)) / slope * FSW + c["ZC_DEBOUNCE"] + 2
    for z in zc[:-1]:
        if z + late >= n:
            continue
        got = flips[(flips >= z) & (flips <= z + late)]
        assert len(got) == 1, (z, flips)
        # the flip happens once the signal is beyond the band, in the new direction
        k = got[0]
        assert np.sign(clean[k]) == pols[k]
    assert len(flips) >= 2 * cycles - 2
    # frequency estimate after two plausible halves: within 0.5 %
    assert abs(freq[-1] - f) / f < 0.005


def run_rms(b, v):
    ffi, lib = b.ffi, b.lib
    pol = ffi.new("pfc_polarity_t*")
    rms = ffi.new("pfc_rms_t*")
    lib.pfc_polarity_init(pol)
    lib.pfc_rms_init(rms)
    latched = []
    last_flip = None
    for k, x in enumerate(v):
        lib.pfc_polarity_step(pol, float(x))
        lib.pfc_rms_step(rms, float(x), pol.zc, 1 if pol.last_half else 0)
        if rms.fresh:
            latched.append((last_flip, k, rms.ms, rms.inv_ms))
        if pol.zc:
            last_flip = k
        assert math.isfinite(rms.inv_ms) and rms.inv_ms > 0
    return latched, rms


@settings(max_examples=20, deadline=None)
@given(
    amp=st.floats(100.0, 400.0),
    f=st.floats(45.0, 66.0),
    phase=st.floats(0, 2 * math.pi),
    h3=st.floats(0.0, 0.15),
    h5=st.floats(0.0, 0.1),
)
def test_rms_matches_numpy(demo_built, amp, f, phase, h3, h5):
    n = int(5 * FSW / f)
    _, _, v = wave(amp, f, phase, n, harm=((3, h3), (5, h5)))
    latched, _ = run_rms(demo_built, v)
    assert len(latched) >= 6
    for a, b, ms, inv in latched:
        ref = float(np.mean(v[a:b].astype(np.float32).astype(float) ** 2))
        assert math.sqrt(ms) == pytest.approx(math.sqrt(ref), rel=0.005)
        assert inv == pytest.approx(1.0 / ms, rel=1e-5)
    # a pure sine's half-cycle rms is its amplitude / sqrt(2) (analytic)
    if h3 == 0 and h5 == 0:
        assert math.sqrt(latched[-1][2]) == pytest.approx(amp / math.sqrt(2), rel=0.005)


def test_rms_dropout_keeps_finite_floor(demo_project, demo_built):
    c = consts(demo_project)
    n = int(3 * FSW / 50)
    _, _, v = wave(325.0, 50.0, 0.3, n)
    v = np.concatenate([v, np.zeros(int(0.2 * FSW)), 0.5 * v[: n // 2]])
    latched, rms = run_rms(demo_built, v)
    assert math.isfinite(rms.inv_ms)
    # the floor bounds 1/Vrms^2 from above whatever the line did
    assert rms.inv_ms <= 1.0 / c["MS_FLOOR_V2"] * (1 + 1e-6)
    # a small line (far below brown-out and the floor, but under the blanking voltage for less
    # than a line loss takes, so still a line) latches the floored value
    _, _, tiny = wave(30.0, 50.0, 0.0, int(4 * FSW / 50))
    latched, rms = run_rms(demo_built, tiny)
    assert latched and latched[-1][3] == pytest.approx(1.0 / c["MS_FLOOR_V2"], rel=1e-6)
    assert rms.brown == 1


def test_iref_product_clamp_and_guard(demo_project, demo_built):
    c = consts(demo_project)
    ffi, lib = demo_built.ffi, demo_built.lib
    s = ffi.new("pfc_iref_t*")
    lib.pfc_iref_init(s)
    # i = P |v| / Vrms^2: 1500 W at 230 V rms, at the peak 325.27 V: 1500 * 325.27 / 52900 =
    # 9.2232 A
    assert lib.pfc_iref_step(s, 1500.0, 325.27, 1.0 / 52900.0, 400.0) == pytest.approx(
        9.2232, rel=1e-4
    )
    assert lib.pfc_iref_step(s, 1e6, 325.0, 1.0 / 52900.0, 400.0) == pytest.approx(
        c["IREF_MAX_A"], rel=1e-6
    )
    assert lib.pfc_iref_step(s, -10.0, 325.0, 1.0 / 52900.0, 400.0) == 0.0
    # above the guard the reference falls by GUARD_STEP of itself a period to 0, and comes back
    # the same way below it (the demo has an input filter: two of its resonance periods, f_res
    # = 1 / (2 pi sqrt((L_src + L_dm) C_x)), hand arithmetic)
    pl = demo_project.config.plant
    f_res = 1.0 / (
        2.0 * math.pi * math.sqrt((pl.source_inductance + pl.dm_inductance) * pl.x_capacitance)
    )
    n = math.ceil(2.0 * demo_project.config.spec.fsw / f_res)
    assert c["GUARD_STEP"] == pytest.approx(1.0 / n, rel=1e-6)
    i0 = lib.pfc_iref_step(s, 1500.0, 325.27, 1.0 / 52900.0, 400.0)
    over = c["VBUS_GUARD_V"] + 1.0
    seen = [lib.pfc_iref_step(s, 1500.0, 325.27, 1.0 / 52900.0, over) for _ in range(n + 1)]
    assert seen[0] == pytest.approx(i0 * (1.0 - 1.0 / n), rel=1e-5)
    assert all(b < a for a, b in zip(seen[:-2], seen[1:-1], strict=True))
    assert seen[-1] == 0.0 and seen[-2] == 0.0
    back = [lib.pfc_iref_step(s, 1500.0, 325.27, 1.0 / 52900.0, 400.0) for _ in range(n)]
    assert back[0] == pytest.approx(i0 / n, rel=1e-5) and back[-1] == pytest.approx(i0, rel=1e-5)


def test_pwm_assignment_table(demo_project, demo_built):
    c = consts(demo_project)
    ffi, lib = demo_built.ffi, demo_built.lib
    per = lib.PFC_PWM_PERIOD_COUNTS
    ramp, sync = int(c["ZC_RAMP_PERIODS"]), int(c["SYNC_DELAY_PERIODS"])
    s = ffi.new("pfc_pwmgen_t*")
    out = ffi.new("pfc_pwm_t*")
    for pol, main, slow, syncsw in ((1, GLO, SLO, GHI), (-1, GHI, SHI, GLO)):
        lib.pfc_pwmgen_init(s)
        # zero-crossing window: disabled -> every gate off, and the compare gives this half's
        # main switch no on-time (a mask applied before its compare cannot turn it on)
        lib.pfc_pwmgen_step(s, 0.5, pol, 0, 0.0, out)
        assert out.gates == 0 and out.compare == (0 if pol > 0 else per)
        rows = []
        fwd = 2.0 * c["SYNC_MIN_A"]  # current flowing in the half's direction
        for k in range(ramp + sync + 3):
            lim = lib.pfc_pwmgen_limit(s)
            lib.pfc_pwmgen_step(s, 0.5, pol, 1, fwd, out)
            rows.append((k, lim, out.compare, out.gates))
        for k, lim, cmp_, g in rows:
            d = min(0.5, lim)
            on = int(d * per + 0.5)
            assert lim == pytest.approx(min(c["DUTY_MAX"], k * c["RAMP_STEP"]), abs=1e-6)
            assert cmp_ == (on if pol > 0 else per - on)
            assert 0 <= cmp_ <= per
            assert g in LEGAL_GATES and (g & (SLO | SHI)) != (SLO | SHI)
            assert g & main and g & slow
            # synchronous switch only after the ramp and the sync delay
            assert bool(g & syncsw) == (k >= ramp + sync - 1)
        # duty ramps in: the first enabled period has no main on-time
        assert rows[0][1] == 0.0
        # hysteresis: once on, kept on while the current has not reversed past -SYNC_MIN_A
        lib.pfc_pwmgen_step(s, 0.5, pol, 1, -0.5 * c["SYNC_MIN_A"], out)
        assert out.gates & main and out.gates & syncsw
        # off once it has (reverse current), and back on only above +SYNC_MIN_A
        lib.pfc_pwmgen_step(s, 0.5, pol, 1, -fwd, out)
        assert out.gates & main and not out.gates & syncsw
        lib.pfc_pwmgen_step(s, 0.5, pol, 1, 0.5 * c["SYNC_MIN_A"], out)
        assert not out.gates & syncsw
        lib.pfc_pwmgen_step(s, 0.5, pol, 1, fwd, out)
        assert out.gates & syncsw
    # polarity unknown: gates off
    lib.pfc_pwmgen_init(s)
    lib.pfc_pwmgen_step(s, 0.5, 0, 1, 0.0, out)
    assert out.gates == 0


def test_slow_leg_changes_switch_only_after_its_off_time_and_near_zero_current(
    demo_project, demo_built
):
    """The slow leg's other switch turns on only after SLOW_OFF_MIN_PERIODS periods with both
    off and with |i| below SLOW_SWAP_MAX_A; else the outputs stay off."""
    c = consts(demo_project)
    ffi, lib = demo_built.ffi, demo_built.lib
    s, out = ffi.new("pfc_pwmgen_t*"), ffi.new("pfc_pwm_t*")
    lib.pfc_pwmgen_init(s)
    lib.pfc_pwmgen_step(s, 0.5, 1, 1, 0.0, out)
    assert out.gates & SLO
    # one off period only, then the negative half: refused
    off = int(c["SLOW_OFF_MIN_PERIODS"])
    for _ in range(off - 1):
        lib.pfc_pwmgen_step(s, 0.5, -1, 0, 0.0, out)
    lib.pfc_pwmgen_step(s, 0.5, -1, 1, 0.0, out)
    assert out.gates == 0
    # off long enough but current flowing: refused
    lib.pfc_pwmgen_step(s, 0.5, -1, 1, 1.5 * c["SLOW_SWAP_MAX_A"], out)
    assert out.gates == 0
    # off long enough and the current near zero: the slow high switch turns on
    lib.pfc_pwmgen_step(s, 0.5, -1, 1, 0.5 * c["SLOW_SWAP_MAX_A"], out)
    assert out.gates & SHI and not out.gates & SLO


adc_code = st.integers(0, 65535)


@settings(max_examples=60, deadline=None)
@given(
    seq=st.lists(st.tuples(adc_code, adc_code, adc_code), min_size=1, max_size=60),
    repeat=st.integers(1, 80),
    stuck=st.sampled_from([None, 0, 1, 2]),
)
def test_step_arbitrary_adc_stays_in_range(demo_built, seq, repeat, stuck):
    """Whatever the ADC says (railed, stuck, beyond full scale), outputs stay legal and finite."""
    ffi, lib = demo_built.ffi, demo_built.lib
    per = lib.PFC_PWM_PERIOD_COUNTS
    c = ffi.new("pfc_ctrl_t*")
    adc = ffi.new("pfc_adc_t*")
    out = ffi.new("pfc_pwm_t*")
    lib.pfc_init(c)
    for k in range(len(seq) * repeat):
        vac, il, vb = seq[k % len(seq)]
        codes = [vac, il, vb]
        if stuck is not None:
            codes[stuck] = seq[0][stuck]
        adc.vac, adc.il, adc.vbus = codes
        lib.pfc_step(c, adc, out)
        assert 0 <= out.compare <= per
        assert out.gates in LEGAL_GATES
        assert out.mode <= 8
        for x in (
            c.vloop.pi.x,
            c.vloop.pcmd,
            c.iloop.pi.x,
            c.iloop.duty,
            c.rms.inv_ms,
            c.bus.avg,
            c.iref.iref,
        ):
            assert math.isfinite(x)
        assert 0.0 <= c.iloop.duty <= 1.0


def test_supervisor_trip_rules(demo_project, demo_built):
    """Over-current while switching trips (gates off in the same period) and counts toward the
    latch; the same current while the gates are already off, or while the line is at or above a
    plausible bus reading (either way the line rectified through the body diodes), is recorded
    but neither counted nor allowed to hold off the restart."""
    ffi, lib = demo_built.ffi, demo_built.lib
    c = consts(demo_project)
    oc = c["OC_TRIP_A"] * 1.2
    sv, sn = ffi.new("pfc_supervisor_t*"), ffi.new("pfc_sense_t*")
    pf = ffi.new("pfc_plaus_t*")
    lib.pfc_plaus_init(pf)
    pl, rm = ffi.new("pfc_polarity_t*"), ffi.new("pfc_rms_t*")
    lib.pfc_polarity_init(pl)
    lib.pfc_rms_init(rm)
    sn.vbus = 400.0

    def step(il_A):
        sn.il = il_A
        lib.pfc_supervisor_step(sv, sn, pf, pl, rm, 0)
        return sv.mode

    # idle (waiting for the line): over-current is recorded only
    lib.pfc_supervisor_init(sv)
    for _ in range(10):
        assert step(oc) == lib.PFC_MODE_WAIT_LINE
    assert sv.trips == 0 and sv.history & lib.PFC_FAULT_OC and not sv.faults & lib.PFC_FAULT_OC
    # switching: each over-current trips, the RETRY_LIMIT-th latches
    for n in range(1, int(c["RETRY_LIMIT"]) + 1):
        sv.mode = lib.PFC_MODE_RUN
        sv.no_main = False  # a fast switch was on in the period sampled
        m = step(-oc)  # either sign of current
        assert sv.trips == n
        assert m == (lib.PFC_MODE_LATCHED if n == c["RETRY_LIMIT"] else lib.PFC_MODE_TRIPPED)
    # switching with the line at or above the bus (within DIODE_MARGIN_V): the current is the
    # line rectified through the body diodes, recorded and not tripped on, as long as the bus
    # reading is one a real bus can show (at most BUS_LOW_MARGIN_V below the line)
    rm.brown = 0  # a healthy line otherwise, so that RUN stays RUN
    for vac, tripped in (
        (sn.vbus - 0.9 * c["DIODE_MARGIN_V"], False),
        (-(sn.vbus - 0.9 * c["DIODE_MARGIN_V"]), False),  # either polarity
        (sn.vbus + 0.9 * c["BUS_LOW_MARGIN_V"], False),
        (sn.vbus - 1.1 * c["DIODE_MARGIN_V"], True),  # the converter has control: a trip
        (sn.vbus + 1.1 * c["BUS_LOW_MARGIN_V"], True),  # a bus reading failed low: a trip
    ):
        lib.pfc_supervisor_init(sv)
        sv.mode = lib.PFC_MODE_RUN
        sv.no_main = False
        sn.vac = vac
        m = step(oc)
        assert (m == lib.PFC_MODE_TRIPPED) == tripped, vac
        assert sv.trips == int(tripped) and sv.history & lib.PFC_FAULT_OC
    # with neither fast switch on in the period sampled, a current forward in the half is the
    # line's through the diodes even below the diode margin (it outlives the peak): not tripped
    # on; reversed (only a switch drives it) it trips
    pl.pol = 1
    for il, tripped in ((oc, False), (-oc, True)):
        lib.pfc_supervisor_init(sv)
        sv.mode = lib.PFC_MODE_RUN
        sn.vac = sn.vbus - 3.0 * c["DIODE_MARGIN_V"]
        sv.no_main = True
        assert (step(il) == lib.PFC_MODE_TRIPPED) == tripped, il
    sn.vac = 0.0
    # tripped: further over-current (diode conduction, gates off) does not restart the retry delay
    lib.pfc_supervisor_init(sv)
    sv.mode = lib.PFC_MODE_RUN
    sv.no_main = False
    step(oc)
    delay = int(c["RETRY_DELAY_PERIODS"])
    modes = [step(oc if k % 100 == 0 else 0.0) for k in range(delay + 1)]
    assert modes[delay - 2] == lib.PFC_MODE_TRIPPED and modes[-1] == lib.PFC_MODE_WAIT_LINE


def test_duty_feedforward_carries_the_dead_time_by_the_currents_sign(demo_project, demo_built):
    """With no error the current loop's duty is its feedforward 1 - |v|/v_bus plus the dead
    time's share of the period while the current is forward, minus it while reversed: in the
    plant's period (plant/kernel.py) the main switch's turn-on waits out the dead time, in
    which a forward current keeps the synchronous switch's body diode on (the off state) and
    a reversed one the main switch's own (the on state); hand arithmetic: d_eff = d -+ td fsw."""
    c = consts(demo_project)
    dt = demo_project.config.plant.dead_time * demo_project.config.spec.fsw
    assert c["DEAD_TIME_DUTY"] == pytest.approx(dt)
    ffi, lib = demo_built.ffi, demo_built.lib
    vout, absv = c["VOUT_V"], 200.0
    for pol in (1, -1):
        for sign in (1.0, -1.0):
            s = ffi.new("pfc_iloop_t*")
            lib.pfc_iloop_init(s)  # 1/v_bus starts at 1/vout
            s.vff = absv  # the feedforward's low-passed |v| settled at absv
            il = pol * sign * 2.0  # 2 A forward (sign +1) or reversed, in this half
            duty = lib.pfc_iloop_step(s, 2.0 * sign, il, pol, c["DUTY_MAX"])
            assert duty == pytest.approx(1.0 - absv / vout + sign * dt, abs=1e-6), (pol, sign)


def test_feedforward_voltage_is_a_first_order_low_pass(demo_project, demo_built):
    """v_ff after n periods of a step of |v| by dV below FF_STEP_V: v0 + dV (1 - (1 - K)^n),
    K = FF_K = 1 - exp(-2 pi f_c / fsw) (the exact discretisation of a first-order lag, hand
    arithmetic); a rise beyond FF_STEP_V with the sample beyond the line's latched peak (a
    line step up) passes at once and sets `surge` for that period only, and the duty of a
    surge period is zero; the same rise inside the line's envelope (the input filter's own
    ring) is filtered like any change and takes no on-time away."""
    c = consts(demo_project)
    fsw = demo_project.config.spec.fsw
    assert c["FF_K"] == pytest.approx(1.0 - math.exp(-2.0 * math.pi * (fsw / 10.0) / fsw))
    ffi, lib = demo_built.ffi, demo_built.lib
    s = ffi.new("pfc_iloop_t*")
    lib.pfc_iloop_init(s)
    s.vff = 200.0
    dv = 0.9 * c["FF_STEP_V"]
    for n in range(1, 13):
        lib.pfc_iloop_track(s, 400.0, 200.0 + dv, True)
        assert not s.surge
        assert s.vff == pytest.approx(200.0 + dv * (1.0 - (1.0 - c["FF_K"]) ** n), rel=1e-5)
    v0 = s.vff
    # inside the envelope: low-passed, no surge
    lib.pfc_iloop_track(s, 400.0, v0 + 1.5 * c["FF_STEP_V"], False)
    assert not s.surge
    assert s.vff == pytest.approx(v0 + c["FF_K"] * 1.5 * c["FF_STEP_V"], rel=1e-5)
    assert lib.pfc_iloop_step(s, 5.0, 1.0, 1, c["DUTY_MAX"]) > 0.0
    # beyond the latched peak: passes at once, no main on-time this period
    s.vff = v0
    lib.pfc_iloop_track(s, 400.0, v0 + 1.5 * c["FF_STEP_V"], True)
    assert s.surge and s.vff == pytest.approx(v0 + 1.5 * c["FF_STEP_V"], rel=1e-5)
    assert lib.pfc_iloop_step(s, 5.0, 1.0, 1, c["DUTY_MAX"]) == 0.0
    # the step's rise going on over the next period (the X capacitor takes a period or two
    # to reach the new line): cut again
    lib.pfc_iloop_track(s, 400.0, s.vff + 1.5 * c["FF_STEP_V"], True)
    assert s.surge
    lib.pfc_iloop_track(s, 400.0, s.vff, True)
    assert not s.surge
    assert lib.pfc_iloop_step(s, 5.0, 1.0, 1, c["DUTY_MAX"]) > 0.0
    # the window is open and the step's rise over: a ring's next rise beyond the peak passes
    # at once and re-opens it, but takes no on-time away (cutting the stage's current each
    # time rang the filter on)
    assert s.step_win > 0
    v1 = s.vff
    lib.pfc_iloop_track(s, 400.0, v1 + 1.5 * c["FF_STEP_V"], True)
    assert not s.surge and s.vff == pytest.approx(v1 + 1.5 * c["FF_STEP_V"], rel=1e-5)
    assert s.step_win == c["FF_STEP_WINDOW"]
    assert lib.pfc_iloop_step(s, 5.0, 1.0, 1, c["DUTY_MAX"]) > 0.0
    # once the window has run out, a step up cuts the on-time again
    for _ in range(int(c["FF_STEP_WINDOW"])):
        lib.pfc_iloop_track(s, 400.0, s.vff, False)
    assert s.step_win == 0
    lib.pfc_iloop_track(s, 400.0, s.vff + 1.5 * c["FF_STEP_V"], True)
    assert s.surge


def test_x_capacitor_current_estimate(demo_project):
    """The xcomp block on a clean 264 V, 50 Hz sine through the polarity detector: after two
    halves, outside the zero-crossing window, its output follows C_x w V_pk cos(theta), theta
    from the line's own crossing (the capacitor's current in the rectified frame, analytic),
    to 3 % of the amplitude (the detector confirms a crossing a few periods late, and the
    table is linear between 33 points)."""
    from codegen.build import build_project
    from design.project import from_config

    prj = from_config(demo_project.config.replace("control", x_cap_compensation="on"))
    b = build_project(prj)
    ffi, lib = b.ffi, b.lib
    pol = ffi.new("pfc_polarity_t*")
    xc = ffi.new("pfc_xcomp_t*")
    lib.pfc_polarity_init(pol)
    lib.pfc_xcomp_init(xc)
    f, amp = 50.0, 264.0 * math.sqrt(2.0)
    n = int(4 * FSW / f)
    t = np.arange(n) / FSW
    v = amp * np.sin(2.0 * math.pi * f * t)
    cx = prj.resolved.x_capacitance_F
    # theta from each half's own start (the rectified frame)
    want = cx * 2.0 * math.pi * f * amp * np.cos(np.mod(2.0 * math.pi * f * t, math.pi))
    got = np.zeros(n)
    for k in range(n):
        lib.pfc_polarity_step(pol, float(v[k]))
        got[k] = lib.pfc_xcomp_step(xc, abs(float(v[k])), pol.zc, pol.last_half, pol.since_zc)
    # away from the crossings, where the reference is blanked anyway (the estimate changes
    # sign when the detector confirms the crossing, a few periods after the line's)
    c = consts(prj)
    late = (t > 2.0 / f) & (np.abs(v) > c["ZC_BLANK_V"])
    peak = cx * 2.0 * math.pi * f * amp
    assert peak > 0.1
    assert np.max(np.abs(got[late] - want[late])) < 0.03 * peak


def test_current_check_with_neither_fast_switch_on(demo_project, demo_built):
    """The current-against-duty check in periods with neither fast switch on (``diode``): the
    duty sits at zero, so the duty model predicts the idle decay (v_bus - |v|) T/L a period.
    A reading stuck forward there (a failed channel holding the duty at zero) is caught; a
    reading that moves (the rectifier's current, whose slope resistive drops set) is live and
    never judged; a reading beyond the over-current trip (the rectifier's surge, which can rail
    the channel) is left to the over-current rule. With a fast switch on, the same stuck
    reading is caught as before."""
    ffi, lib = demo_built.ffi, demo_built.lib
    c = consts(demo_project)
    vbus, vabs = 400.0, 300.0
    dff = 1.0 - vabs / vbus  # the feedforward the duty sits below: du = 0 - dff
    fall = (vbus - vabs) * c["IL_SLOPE_A_PER_V"]  # the idle decay a period (A)
    err = c["IL_PLAUS_ERR_A"]

    def faults(readings, diode):
        s = ffi.new("pfc_plaus_t*")
        lib.pfc_plaus_init(s)
        for il in readings:
            lib.pfc_plaus_current(s, 0.0, float(il), -dff, vbus, False, diode)
        return bool(s.fault & lib.PFC_SENSE_IL_IMPLAUSIBLE)

    stuck = [0.5 * c["OC_TRIP_A"]] * 12
    assert 12 * fall > 2 * err  # the decay the stuck reading misses is well beyond the bound
    assert faults(stuck, True)
    assert faults(stuck, False)
    moving = [0.5 * c["OC_TRIP_A"] - 0.1 * fall * k for k in range(12)]  # slower than predicted
    assert not faults(moving, True)
    assert faults(moving, False)  # with a switch on it lags the duty: judged
    surge = [1.05 * c["OC_TRIP_A"]] * 12  # railed beyond the trip
    assert not faults(surge, True)
