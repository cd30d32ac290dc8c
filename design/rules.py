"""The rules of the firmware's derived constants: each number written once, with what it is a
fraction of (or its unit), for ``design.constants`` and the config header's origins."""

from __future__ import annotations

from collections.abc import Callable

# default rules of derived settings (design.derive; fractions of the named quantity)
OC_TRIP_OF_PEAK = 1.5  # over-current trip: of the sized peak inductor current
OV_TRIP_OF_VOUT = 1.1  # over-voltage trip: of vout
HW_OV_OF_VOUT = 1.15  # hardware over-voltage comparator: of vout (common practice)
DEVICE_OF_OC = 2.0  # device peak current: of the over-current trip (illustrative)
HYST_OF_VPK_MIN = 0.04  # polarity hysteresis: of the lowest line peak
BLANK_OF_VPK_MIN = 0.08  # zero-crossing blanking: of the lowest line peak
BROWNOUT_OFF_OF_VMIN = 0.85  # brown-out stop: of vin_rms_min
BROWNOUT_ON_OF_VMIN = 0.92  # brown-out restart: of vin_rms_min
RANGE_MARGIN = 1.25  # ADC full scale: of the largest value the channel must read
CURRENT_BW_DIVISOR = 15.0  # current-loop crossover: fsw over this (centre-aligned carrier)
# ... and with the edge-aligned carrier, whose sample can lag the duty by up to a whole period
# (``design.tuning``): at fsw/15 its sampled plant lags 126 deg and 57 deg of phase margin is
# out of reach; at fsw/25 the PI reaches it with a gain margin (11.9 dB on the demo) near the
# centre-aligned loop's at fsw/15 (13.2 dB), computed on the sampled loops
CURRENT_BW_DIVISOR_EDGE = 25.0
# ... and with an input filter at most its resonance over this: near the resonance the X
# capacitor's voltage, which the stage's own current moves, comes back into the duty through
# the feedforward and the current reference and takes the loop's phase; with the reference's
# path gone (light load) survey designs of 4-10 kW with 1 uF per kW on a 20 uH grid (9-14 kHz
# resonances) had negative phase margins at fsw/15, and at f_res/3 57 deg or more over the
# whole load range (computed on the sampled loops; common practice keeps the crossover well
# below the filter's resonance)
CURRENT_BW_OF_FRES = 3.0
X_CAP_PER_W = 1e-9  # input filter's X capacitance by default: 1 uF per kW of rated power
# (typical of a kW front end; illustrative)
# duty feedforward's line voltage (and the current reference's): a first-order low-pass at
# fsw over this, above the current loop's crossover (the tuning takes its path through the X
# capacitor's voltage in; on the appliance example the raw sample in the reference cost 4.5 dB
# of gain margin; see README)
FF_CORNER_DIVISOR = 10.0
RAMP_HOLD_OF_VOUT = 0.02  # soft-start ramp holds while the bus lags it by its lag plus this
FF_STEP_OF_VPK_MIN = 0.1  # |v| off the filtered value by this x the lowest peak: a line step
# soft start: the ramp's capacitor charging power C vout dv/dt at its end, of rated output
# power, at most this (the load waits for power good near the ramp's end, and the command's
# cap PCMD_MAX_OF_RATED must still hold the load and the ramp's last part) ...
SOFT_START_CHARGE_OF_RATED = 0.5
SOFT_START_MIN_S = 0.1  # ... and the ramp never shorter than this (s), a common practice value
# a soft_start_time set in the config is refused when the ramp alone asks more than the rating
MIN_PERIOD_COUNTS = 100  # timer counts per PWM period at least (duty resolution 1 %)
MAX_PERIOD_COUNTS = 65535  # the compare is 16 bits

# rules of the firmware's constants (design.const_signal, design.const_control; fractions
# of the named quantity unless a unit is given)
RAIL_MARGIN_COUNTS = 2  # a code this close to either end counts as railed
ZC_NEAR_MARGIN_PERIODS = 2  # a polarity change needs the line near zero this recently
STUCK_OF_HALF = 1.5  # a frozen line code for this many of the longest half periods is stuck
HALF_MIN_FREQ_MARGIN = 1.25  # shortest plausible half: at freq_max times this
HALF_MAX_FREQ_MARGIN = 0.8  # longest plausible half: at freq_min times this
FREQ_TOL = 0.01  # the frequency estimate is good to 0.5 %; the band edges get twice that
MS_FLOOR_OF_BROWNOUT = 0.5  # floor of the rms before 1/Vrms^2: of the brown-out stop level
RMS_RISE_MARGIN = 1.15  # a sample this far above the latched peak raises the rms at once
PCMD_MAX_OF_RATED = 1.3  # largest power command: of rated input power
IREF_MAX_OF_PEAK = 1.25  # largest current reference: of the sized peak line current ...
IREF_MAX_OF_OC = 0.85  # ... and of the over-current trip, the smaller of the two
VBUS_GUARD_OF_SPAN = 0.6  # reference zeroed above vout + this x (ov_trip - vout)
# ... over this many periods of the input filter's resonance (none: at once): a stage current cut
# in one period rings the filter by the step times its characteristic impedance
GUARD_RAMP_RESONANCES = 2.0
DIODE_MARGIN_OF_VOUT = 0.02  # |v| within this of the bus: the line rectified by the diodes
PRECHARGE_OF_PEAK = 0.85  # bus precharged at this fraction of the line peak ...
RELAY_RISE_OF_VOUT = 0.01  # relay closes with the bus steady: moving less than this (of vout)
RELAY_CLOSE_OF_PEAK = 0.95  # ... in a half cycle, and at this fraction of the line peak
RELAY_HOLD_HALVES = 4  # ... or flat this many crossings at PRECHARGE_OF_PEAK (a load holds it):
RELAY_FLAT_OF_VOUT = 0.0025  # ... moving less than this (of vout) per half cycle
RELAY_WAIT_OF_DELAY = 1.5  # switching waits this many relay contact times after closing it
RELAY_OPEN_OF_PEAK = 0.6  # relay opened when, without the line, the bus falls below this
RELAY_FLOOR_MARGIN = 1.03  # ... or below this x vout_min_holdup (the load's stop level)
PG_ON_OF_VOUT = 0.95  # power good set in RUN at this fraction of vout ...
PG_OFF_OF_VOUT = 0.85  # ... and cleared below this one, or on a stop
LINE_LOSS_RESET_S = 0.5  # an outage longer than this (s) starts afresh
TRIP_DECAY_S = 10.0  # clean running that takes one trip off the count (s)
# rules of the plausibility block (design.const_safety)
BUS_PLAUS_OF_PEAK = 0.7  # while switching, a bus reading below this (of the line peak) failed
BUS_LOW_PERIODS = 8  # consecutive periods of a bus reading below the line: bus channel failed
IL_PLAUS_ERR_OF_PEAK = 0.25  # current rise the duty drives beyond the measured (of the peak)
IL_PLAUS_PERIODS = 8  # ... over a run of at most this many switching periods ...
IL_STILL_COUNTS = 4  # ... with the current code within this many codes ...
IL_ZERO_OF_PEAK = 0.03  # current channel's mean at rest beyond this (of the peak): an offset
IL_ZERO_MIN_PERIODS = 4  # ... over an at-rest stretch of at least this many periods
IL_TRACK_ERR_OF_PEAK = 0.03  # ... and off its reference by this (of the peak): current failed
IL_IDLE_OF_PEAK = 0.1  # with the gates off and the line read below the bus, a current beyond this
IL_IDLE_FALL_OF_SLOPE = 0.5  # ... (of the peak) falling by less than this x the least fall the
IL_IDLE_PERIODS = 4  # ... diodes impose, this many periods in a row: line or current channel failed
BAL_WINDOW_S = 0.0005  # energy check: the bus's rise over windows of this length (s) ...
BAL_MARGIN = 1.5  # ... beyond this x the window's largest power the current reference draws,
# iref |v| (the real current follows its reference within the loop's error) ...
BAL_FLOOR_OF_PCMD_MAX = 0.1  # ... that power taken as at least this x PCMD_MAX_W ...
BAL_NOISE_COUNTS = 8  # ... plus the bus reading's noise, this many codes at vout
LINE_OFFSET_OF_VPK_MIN = 0.05  # line channel's cycle mean beyond this (of the lowest peak)
LINE_OFFSET_CYCLES = 2  # ... in this many consecutive cycles: line channel failed
BAD_HALVES_MAX = 2  # consecutive implausible half cycles that stop switching
RMS_AGE_OF_HALF_MAX = 2.0  # an rms older than this many longest halves of switching stops it
SLOW_OFF_MIN_PERIODS = 2  # slow leg off at least this long between its two switches
SLOW_SWAP_OF_PEAK = 0.05  # ... and |i| below this (of the sized peak) at the change
SYNC_MIN_OF_PEAK = 0.02  # synchronous switch only with the current this far forward


Add = Callable[..., None]


def u32(x: float) -> int:
    v = int(x)
    if v < 0 or v > 0xFFFFFFFF:
        raise ValueError(f"constant {x} does not fit an unsigned 32-bit value")
    return v


# C counters the firmware keeps each period count in: constant -> (smallest, largest allowed,
# the config key it comes from, the counter)
COUNTER_LIMITS = {
    "LINE_LOSS_PERIODS": (1, 65535, ("protection", "line_loss_time"), "uint16_t low_cnt"),
    "RETRY_DELAY_PERIODS": (1, 0xFFFFFFFF, ("protection", "retry_delay"), "uint32_t timer"),
    "HALF_MAX_PERIODS": (1, 65535, ("spec", "fsw"), "uint16_t since_zc"),
    "BAL_PERIODS": (1, 65534, ("spec", "fsw"), "uint16_t bal_n"),
    "STUCK_PERIODS": (1, 65535, ("spec", "fsw"), "uint16_t stuck_cnt"),
    "RMS_AGE_MAX_PERIODS": (1, 65535, ("spec", "fsw"), "uint16_t rms_age"),
    "RELAY_WAIT_PERIODS": (1, 0xFFFFFFFF, ("plant", "relay_delay"), "uint32_t relay_timer"),
    "BUS_BLOCK_NOMINAL": (1, 65535, ("spec", "fsw"), "uint16_t blen"),
}
