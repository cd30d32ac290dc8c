"""The single-fault invariants: what a failed sensor or a glitch may never lead to, as a
table of small named functions (message when violated, ``None`` when held), each with its
bound and reason.

  hw_bus          the real bus stays below [protection] hw_ov_level (default 1.15 vout, the
                  independent hardware comparator's level), except where the bus channel
                  reads the real bus low by a plausible amount (an offset below zero, a gain
                  below one, stuck at a value above the line): no ADC-based check can see
                  that, and only the hardware comparator the board notes require protects
  device_current  the real inductor current stays below [protection] device_current_limit
                  (default 2 x oc_trip, illustrative: the switches' pulsed rating)
  fault_response  a fault the firmware can detect (``detectable``) has the gates off within
                  RESPONSE_PERIODS of the fault and for as long as it lasts, in a mode that
                  does not switch; the channels it names (rail, frozen code, bus below the
                  line, current not moving as the duty drives it, line offset) are in the
                  fault bits (for a line or bus fault the current channel's bit counts too:
                  the current check sets the measured change against the duty, line and bus
                  readings, and cannot tell which of them is wrong)
  restart         no (re)start of switching with the real bus above the over-voltage trip
                  or below PRECHARGE_OF_PEAK of the line peak
  hiccup          at most [protection] retry_limit trips before the stage latches
  slow_swap       no slow-leg role change without SLOW_OFF_MIN_PERIODS off periods and the
                  current below SLOW_SWAP_MAX_A (``slow_leg_unsafe_swaps``)
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from design.contract import CHANNEL_FAULT, FIELD_CHANNEL, Channel, Mode
from design.rules import (
    HALF_MIN_FREQ_MARGIN,
    IL_PLAUS_PERIODS,
    LINE_OFFSET_CYCLES,
    LINE_OFFSET_OF_VPK_MIN,
    PRECHARGE_OF_PEAK,
)
from harness.closedloop.report import unsafe_swaps
from harness.closedloop.scenario import Event

from .invariants import Lane, legs, sane

# periods from a detectable fault to gates off: the bus check's and the sense block's counts
# plus the line's travel to where the check can see (a quarter line cycle at most) are
# added per fault in ``_response_bound``; this is the common part (the one-period latency of
# the output and a margin of a few periods for the debounce of the sensed values)
RESPONSE_PERIODS = 4
SENSE_TOL = 0.02  # the cases' gain errors, up to 1 % on each of the two channels compared
SWITCHING = (Mode.SOFT_START, Mode.RUN)


def sensor_events(ln: Lane) -> list[Event]:
    return [ev for ev in ln.scn.events if ev.kind == "sensor"]


def _zero_code(ln: Lane, ch: int) -> float:
    r = ln.prj.resolved
    if r.line_split and ch == Channel.VAC:
        return 0.0  # L and N: unipolar, each from the bus minus
    return (r.vac_offset_counts, r.il_offset_counts, 0.0)[ch]


def _per_count(ln: Lane, ch: int) -> float:
    r = ln.prj.resolved
    if r.line_split and ch == Channel.VAC:
        return r.ln_V_per_count
    return (r.vac_V_per_count, r.il_A_per_count, r.vbus_V_per_count)[ch]


def channel_of(ev: Event) -> Channel:
    """The logical channel a sensor event's ADC channel belongs to (L and N: the line)."""
    return Channel(FIELD_CHANNEL[ev.word("channel")])


def bus_hidden(ln: Lane, ev: Event) -> bool:
    """A bus-channel fault that reads the real bus low by an amount no ADC check can see."""
    if ev.word("channel") != "vbus":
        return False
    f = ev.word("fault")
    vpk = math.sqrt(2.0) * ln.scn.vrms_V
    if f == "offset":
        return ev.get("value_counts") < 0.0
    if f == "gain":
        return ev.get("value") < 1.0 and ev.get("value") * ln.prj.config.spec.vout > vpk
    if f == "stuck":
        return ev.get("value_counts") * _per_count(ln, Channel.VBUS) > vpk
    return False


def detectable(ln: Lane, ev: Event) -> tuple[bool, int, bool]:
    """(whether the firmware must detect ``ev``, the bound in periods, whether the fault
    bits must name the channel) for a lasting fault that starts while the stage is running.
    A line channel reading 0 V (open, or stuck near its zero code) is a line loss to any
    controller: gates off, not named."""
    ch, f = channel_of(ev), ev.word("fault")
    pr, fsw = ln.prj.config.sensing, ln.prj.config.spec.fsw
    quarter = int(math.ceil(fsw / (4.0 * ln.scn.freq_Hz)))
    full = ln.prj.resolved.adc_full_counts
    if f in ("offset", "gain") or (f == "glitch" and ev.get("periods") < 2 * quarter):
        if ch == Channel.VAC and f == "offset":
            vpk_min = math.sqrt(2.0) * ln.prj.config.spec.vin_rms_min
            off = abs(ev.get("value_counts")) * _per_count(ln, ch)
            big = off > 2 * LINE_OFFSET_OF_VPK_MIN * vpk_min
            cycle = int(math.ceil(fsw / ln.scn.freq_Hz))
            # the offset is measured over whole cycles of plausible halves; an offset that
            # shortens the reading's other half below the shortest plausible one (or leaves no
            # crossing: a DC line to any controller) stops the stage as an implausible line,
            # gates off, without a name for it
            x = off / (math.sqrt(2.0) * ln.scn.vrms_V)
            f_short = HALF_MIN_FREQ_MARGIN * ln.prj.config.protection.freq_max
            halves_ok = x < math.sin(0.5 * math.pi * (1.0 - ln.scn.freq_Hz / f_short))
            return big, (LINE_OFFSET_CYCLES + 2) * cycle, halves_ok
        return False, 0, False
    value = _zero_code(ln, ch) if f == "open" else ev.get("value_counts")
    railed = value <= 2 or value >= full - 2
    if ch == Channel.VBUS:
        vpk = math.sqrt(2.0) * ln.scn.vrms_V
        low = value * _per_count(ln, ch) < 0.5 * vpk
        return (railed or low), quarter + RESPONSE_PERIODS + 8, True
    if ch == Channel.IL:
        near_zero = (
            abs(value - _zero_code(ln, ch)) * _per_count(ln, ch) < 0.05 * ln.prj.sizing.iline_peak_A
        )
        loaded = ln.scn.load_power_W > 0.2 * ln.prj.config.spec.power
        return near_zero and loaded, quarter + IL_PLAUS_PERIODS + RESPONSE_PERIODS, True
    if ln.prj.resolved.line_split:
        # L or N failed: a railed one is named (sense block); any other code makes the line
        # reading vl - vn wrong by up to the bus in one half or both (no frozen reading: the
        # other node still moves), so the stage must stop, as for an implausible line, but
        # need not say which channel
        half = int(math.ceil(fsw / (2.0 * ln.prj.config.protection.freq_min)))
        return True, 3 * half + pr.rail_periods + quarter, value >= full - 2
    # the line channel: railed or frozen away from zero (sense block), or at zero (line loss)
    at_zero = abs(value - _zero_code(ln, ch)) * _per_count(ln, ch) < ln.prj.resolved.zc_blank_V
    stuck = int(1.5 * fsw / (2.0 * ln.prj.config.protection.freq_min))
    return True, stuck + pr.rail_periods + quarter, not at_zero


def hw_bus(ln: Lane) -> str | None:
    level = ln.prj.resolved.hw_ov_level_V
    if any(bus_hidden(ln, ev) for ev in sensor_events(ln)):
        return None
    vmax = float(ln.d["vbus_V"].max())
    ln.figures["vbus_max_V"] = vmax
    return f"real bus {vmax:.1f} V > hw_ov_level {level:.1f} V" if vmax > level else None


def device_current(ln: Lane) -> str | None:
    lim = ln.prj.resolved.device_current_A
    peak = float(np.maximum(np.abs(ln.d["i_max_A"]), np.abs(ln.d["i_min_A"])).max())
    ln.figures["il_peak_A"] = peak
    return f"real current {peak:.1f} A > device limit {lim:.1f} A" if peak > lim else None


def fault_response(ln: Lane) -> str | None:
    t, modes, g = ln.d["t_s"], ln.modes, ln.gates
    for ev in sensor_events(ln):
        k0 = int(np.searchsorted(t, ev.t_s))
        if k0 >= len(t) or modes[max(k0 - 1, 0)] not in SWITCHING:
            continue  # only faults that start while switching are bounded here
        must, bound, name = detectable(ln, ev)
        if not must:
            continue
        end = ev.t_s + ev.get("duration", math.inf)
        k1, k2 = k0 + bound, int(np.searchsorted(t, end))
        if k1 >= min(k2, len(t)):
            continue
        on = np.flatnonzero(g[k1:k2] != 0)
        if len(on):
            return (
                f"{ev.word('channel')} {ev.word('fault')} at t = {ev.t_s:g} s: gates on at "
                f"t = {t[k1 + on[0]]:.5f} s, {k1 + on[0] - k0} periods after (bound {bound})"
            )
        bit = int(CHANNEL_FAULT[int(channel_of(ev))])
        if channel_of(ev) in (Channel.VAC, Channel.VBUS):
            # the current check sets the current's change against the duty, the line and the
            # bus readings: a wrong line or bus reading makes them disagree too, and it may
            # see that first and name the current channel
            bit |= int(CHANNEL_FAULT[int(Channel.IL)])
        if name and not int(ln.d["faults"][k1]) & bit:
            return (
                f"{ev.word('channel')} {ev.word('fault')} at t = {ev.t_s:g} s: gates off but "
                f"the faults {int(ln.d['faults'][k1])} do not name the channel"
            )
    return None


def restart(ln: Lane) -> str | None:
    g, vb, vs = ln.gates, ln.d["vbus_V"], ln.d["vs_V"]
    starts = (
        np.flatnonzero(
            (g[1:] != 0) & (ln.modes[:-1] != Mode.SOFT_START) & (ln.modes[:-1] != Mode.RUN)
        )
        + 1
    )
    if not len(starts):
        return None
    half = int(ln.prj.config.spec.fsw / (2.0 * ln.scn.freq_Hz))
    ov = ln.prj.resolved.ov_trip_V
    for k in starts:
        peak = float(np.abs(vs[max(0, k - half) : k + 1]).max())  # the line's last half cycle
        if vb[k] > ov * (1.0 + SENSE_TOL) or vb[k] < PRECHARGE_OF_PEAK * peak * (1.0 - SENSE_TOL):
            return (
                f"switching restarted at t = {ln.d['t_s'][k]:.5f} s with the bus at {vb[k]:.1f} V"
            )
    return None


def hiccup(ln: Lane) -> str | None:
    m = ln.modes
    trips = int(np.sum((m[1:] == Mode.TRIPPED) & (m[:-1] != Mode.TRIPPED)))
    ln.figures["trips"] = trips
    limit = ln.prj.config.protection.retry_limit
    return f"{trips} trips (retry_limit {limit}) without latching" if trips > limit else None


def slow_swap(ln: Lane) -> str | None:
    n = unsafe_swaps(ln.d, ln.prj)
    ln.figures["slow_leg_unsafe_swaps"] = n
    return f"{n} slow-leg role changes without the off time or with current" if n else None


SAFETY_INVARIANTS: dict[str, Callable[[Lane], str | None]] = {
    "legs": legs,
    "sane": sane,
    "hw_bus": hw_bus,
    "device_current": device_current,
    "fault_response": fault_response,
    "restart": restart,
    "hiccup": hiccup,
    "slow_swap": slow_swap,
}
