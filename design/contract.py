"""The controller's interface, written once: gate bits, supervisor modes and their allowed
edges, fault bits, the sense block's fault bits, the input and output records, the probe
layout of the host build, and the lockstep link's framing and request types.

The C templates render their macros from these tables (a test renders the C and checks
every macro against them); the plant, the records' dtypes, the reports, the fuzz
invariants and the host side of the link read the same names.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import IntEnum, IntFlag


class Gate(IntFlag):
    """Bits of the output record's gate-enable mask (a set bit lets that switch conduct)."""

    FAST_LO = 1
    FAST_HI = 2
    SLOW_LO = 4
    SLOW_HI = 8


GATE_DOCS = {
    Gate.FAST_LO: "fast leg, low switch",
    Gate.FAST_HI: "fast leg, high switch",
    Gate.SLOW_LO: "slow leg, low switch",
    Gate.SLOW_HI: "slow leg, high switch",
}


class Mode(IntEnum):
    """Supervisor modes (the output record's ``mode``).  Switching only in SOFT_START and RUN."""

    WAIT_LINE = 0
    PRECHARGED = 1
    SOFT_START = 2
    RUN = 3
    LINE_LOSS = 4
    BROWNOUT = 5
    TRIPPED = 6
    LATCHED = 7
    SENSOR_FAULT = 8


MODE_DOCS = {
    Mode.WAIT_LINE: "waiting for a valid line (frequency, rms, no brown-out) and a precharged bus",
    Mode.PRECHARGED: "line valid, bus^2 >= {P}_PRECHARGE_K x line mean square; start at the "
    "next crossing",
    Mode.SOFT_START: "reference ramps from the measured bus to {P}_VOUT_V",
    Mode.RUN: "regulating",
    Mode.LINE_LOSS: "line lost: gates off, integrators and rms frozen; resume at the next crossing",
    Mode.BROWNOUT: "line rms under the brown-out threshold: gates off until above the restart one",
    Mode.TRIPPED: "over-voltage/over-current trip while switching: gates off, retry after "
    "{P}_RETRY_DELAY_PERIODS",
    Mode.LATCHED: "{P}_RETRY_LIMIT trips not yet decayed: off until a fault-clear request",
    Mode.SENSOR_FAULT: "a sensor railed, stuck or implausible, or a non-finite state: off "
    "until a fault-clear request",
}

M = Mode
# Mode changes the supervisor may make from one period to the next (the fuzz invariant `sane`).
MODE_EDGES: frozenset[tuple[Mode, Mode]] = frozenset(
    {
        (M.WAIT_LINE, M.PRECHARGED),
        (M.PRECHARGED, M.WAIT_LINE),
        (M.PRECHARGED, M.SOFT_START),
        (M.SOFT_START, M.RUN),
        (M.SOFT_START, M.LINE_LOSS),
        (M.RUN, M.LINE_LOSS),
        (M.SOFT_START, M.BROWNOUT),
        (M.RUN, M.BROWNOUT),
        (M.SOFT_START, M.WAIT_LINE),
        (M.RUN, M.WAIT_LINE),
        (M.LINE_LOSS, M.SOFT_START),
        (M.LINE_LOSS, M.WAIT_LINE),
        (M.BROWNOUT, M.SOFT_START),
        (M.TRIPPED, M.WAIT_LINE),
        (M.TRIPPED, M.LATCHED),
    }
    | {(m, M.TRIPPED) for m in Mode if m < M.TRIPPED}
    | {(m, M.LATCHED) for m in Mode if m < M.TRIPPED}
    | {(m, M.SENSOR_FAULT) for m in Mode if m < M.SENSOR_FAULT}
    | {(M.LATCHED, M.WAIT_LINE), (M.SENSOR_FAULT, M.WAIT_LINE)}  # a fault-clear request
)
del M


class Fault(IntFlag):
    """Bits of the output record's ``faults``: active conditions, and history bits that stay."""

    OV = 1
    OC = 2
    BROWNOUT = 4
    LINE_LOSS = 8
    FREQ = 16
    SENSOR = 32
    LATCHED = 64
    NONFINITE = 128
    SENSOR_VAC = 256
    SENSOR_IL = 512
    SENSOR_VBUS = 1024


FAULT_DOCS = {
    Fault.OV: "bus over-voltage trip",
    Fault.OC: "inductor over-current trip",
    Fault.BROWNOUT: "line rms below the brown-out level",
    Fault.LINE_LOSS: "line lost",
    Fault.FREQ: "line frequency out of the accepted band",
    Fault.SENSOR: "a sensor channel railed or stuck (history: stays set)",
    Fault.LATCHED: "trips latched the stage off (history: stays set)",
    Fault.NONFINITE: "a non-finite controller state was cleared",
    Fault.SENSOR_VAC: "the line-voltage channel failed (history: stays set)",
    Fault.SENSOR_IL: "the inductor-current channel failed (history: stays set)",
    Fault.SENSOR_VBUS: "the bus-voltage channel failed (history: stays set)",
}
# the bits the output's faults keep once set (history)
FAULT_HISTORY = (
    Fault.LATCHED | Fault.SENSOR | Fault.SENSOR_VAC | Fault.SENSOR_IL | Fault.SENSOR_VBUS
)
# the fault bit naming each channel
CHANNEL_FAULT = {0: Fault.SENSOR_VAC, 1: Fault.SENSOR_IL, 2: Fault.SENSOR_VBUS}


class Status(IntFlag):
    """Bits of the output record's ``status``: the controller's commands to the board."""

    RELAY = 1  # close the inrush limiter's bypass relay
    POWER_GOOD = 2  # the bus is fit for the downstream converter


STATUS_DOCS = {
    Status.RELAY: "close the inrush limiter's bypass relay (clear: open)",
    Status.POWER_GOOD: "power good for the downstream converter, with hysteresis",
}


class Channel(IntEnum):
    """ADC channels, in the order of the input record."""

    VAC = 0
    IL = 1
    VBUS = 2


class SenseFault(IntFlag):
    """Latched fault bits of the sense block (a railed channel's bit is 1 << its channel)."""

    LINE_RAIL = 1 << Channel.VAC
    BUS_RAIL = 1 << Channel.VBUS
    LINE_STUCK = 8
    BUS_LOW = 16
    IL_IMPLAUSIBLE = 32
    LINE_OFFSET = 64
    IL_OFFSET = 128
    IDLE_CURRENT = 256
    ENERGY = 512


SENSE_FAULT_DOCS = {
    SenseFault.LINE_RAIL: "line channel at a rail",
    SenseFault.BUS_RAIL: "bus channel at its top rail",
    SenseFault.LINE_STUCK: "line channel frozen on one count away from zero",
    SenseFault.BUS_LOW: "bus reads below the line by more than {P}_BUS_LOW_MARGIN_V while "
    "switching: the bus or the line channel failed (plausibility block)",
    SenseFault.IL_IMPLAUSIBLE: "current far under its reference with the duty at its limit "
    "(plausibility block)",
    SenseFault.LINE_OFFSET: "line channel's mean over a whole cycle beyond "
    "{P}_LINE_OFFSET_MAX_V (plausibility block)",
    SenseFault.IL_OFFSET: "current channel off zero beyond {P}_IL_ZERO_MAX_A with the gates off "
    "and the line in the blanking band, where no current flows (plausibility block)",
    SenseFault.IDLE_CURRENT: "current beyond {P}_IL_IDLE_A with the gates off and the line read "
    "below the bus by {P}_BUS_LOW_MARGIN_V, longer than the inductor takes to empty: the line "
    "channel misses a line that is there (or the current channel reads a flow that is not) "
    "(plausibility block)",
    SenseFault.ENERGY: "bus energy rising, while switching with the line well below the bus, "
    "faster than {P}_BAL_V2_PER_W x the window's largest iref x |v_line| allows over "
    "{P}_BAL_PERIODS periods (more power than the current reference draws): the current "
    "channel reads low (or the bus channel moves on its own) (plausibility block)",
}
# the channels each sense fault names (a bus reading below the line: one of the two is wrong)
SENSE_CHANNEL: dict[SenseFault, tuple[Channel, ...]] = {
    SenseFault.LINE_RAIL: (Channel.VAC,),
    SenseFault.BUS_RAIL: (Channel.VBUS,),
    SenseFault.LINE_STUCK: (Channel.VAC,),
    SenseFault.BUS_LOW: (Channel.VAC, Channel.VBUS),
    SenseFault.IL_IMPLAUSIBLE: (Channel.IL,),
    SenseFault.LINE_OFFSET: (Channel.VAC,),
    SenseFault.IL_OFFSET: (Channel.IL,),
    SenseFault.IDLE_CURRENT: (Channel.VAC, Channel.IL),
    SenseFault.ENERGY: (Channel.IL, Channel.VBUS),
}


class Start(IntEnum):
    """What the supervisor asks of the voltage loop in a period."""

    NONE = 0
    START = 1  # soft start from scratch
    RESUME = 2  # restart after line loss or brown-out, integrator kept


@dataclass(frozen=True)
class Field:
    """One field of a record shared between the C and the harness."""

    name: str
    ctype: str
    dtype: str  # numpy dtype string of the same field
    doc: str


ADC_FIELDS = (
    Field("vac", "uint16_t", "<u2", "line voltage: bipolar, 0 V at {P}_VAC_OFFSET_COUNTS [counts]"),
    Field(
        "il", "uint16_t", "<u2", "inductor current: bipolar, 0 A at {P}_IL_OFFSET_COUNTS [counts]"
    ),
    Field("vbus", "uint16_t", "<u2", "bus voltage: unipolar, 0 V at 0 counts [counts]"),
)
# split line sensing (``[sensing] line = "split"``): L and N each measured to the bus minus on a
# unipolar channel; the line is vl - vn.  The current and bus keep their places.
ADC_FIELDS_SPLIT = (
    Field(
        "vl",
        "uint16_t",
        "<u2",
        "line terminal L to the bus minus: unipolar, 0 V at 0 counts [counts]",
    ),
    ADC_FIELDS[1],
    ADC_FIELDS[2],
    Field(
        "vn",
        "uint16_t",
        "<u2",
        "neutral terminal N to the bus minus: unipolar, 0 V at 0 counts [counts]",
    ),
)
# the logical channel each ADC field belongs to (L and N are the line's two halves)
FIELD_CHANNEL = {"vac": 0, "vl": 0, "il": 1, "vbus": 2, "vn": 0}


def adc_fields(split: bool) -> tuple[Field, ...]:
    """The input record's fields: bipolar line sensing, or L and N apart."""
    return ADC_FIELDS_SPLIT if split else ADC_FIELDS


OUTPUT_FIELDS = (
    Field(
        "compare",
        "uint16_t",
        "<u2",
        "low fast-leg switch on-time, 0..{P}_PWM_PERIOD_COUNTS "
        "[timer counts]; the timer inserts the dead time",
    ),
    Field("gates", "uint8_t", "u1", "{P}_GATE_* bits of the switches allowed to conduct"),
    Field("mode", "uint8_t", "u1", "supervisor mode, {P}_MODE_*"),
    Field("faults", "uint16_t", "<u2", "active fault bits, {P}_FAULT_*"),
    Field("status", "uint8_t", "u1", "{P}_STATUS_* bits: relay command, power good"),
)
# Internals the host build copies out each period (SI units; q15 builds convert from per unit).
PROBES = (
    ("duty", "1", "main-switch duty"),
    ("iref_A", "A", "current reference"),
    ("vref_V", "V", "bus reference"),
    ("pcmd_W", "W", "input power command"),
)

NUMBER_FORMATS = {"float32": 0, "q15": 1}  # the number-format code of the C and of HELLO_ACK


class Request(IntEnum):
    """Link request types; the answer's type is the request's | ACK_BIT."""

    HELLO = 0x01
    RESET = 0x02
    STEP = 0x03
    SNAPSHOT = 0x04
    COST = 0x05


class LinkErr(IntEnum):
    """Codes in the payload of an ERROR frame."""

    BAD_LENGTH = 1
    UNKNOWN_TYPE = 2
    REFUSED = 3  # RESET of a latched or sensor-faulted controller (see LINK_RESET_CLEARS_FAULTS)


# The PWM timings every part shares, by ``[control] carrier``: the plant simulates the chosen
# one (plant.kernel), the tuning's sampled loops assume it (design.tuning), the board header
# tells the board to set its timer so (<prefix>_board.h). Changing a value here means changing
# all three. In both the compare is the fast leg's low-switch on-time in counts of a full
# period, and compare and gates take effect together at the period start.
TIMINGS = {
    "centre": {
        "carrier": "centre-aligned",  # up-down counter; the low switch on d T/2 at each end
        "sample": "counter top",  # mid-period: the period's average current in CCM
        "update": "period start",  # compare and gates from the shadow registers at the bottom
    },
    "edge": {
        "carrier": "edge-aligned",  # up counter; the low switch on for d T from the start
        "sample": "half the low switch's on-time",  # a second compare at compare/2: the
        # middle of a ramp, the period's average current in CCM
        "update": "period start",  # compare, gates and the ADC trigger at the counter's reset
    },
}
CARRIERS = tuple(TIMINGS)  # the choices of [control] carrier


def timing(carrier: str) -> dict[str, str]:
    """The timing of ``[control] carrier`` (``"centre"`` or ``"edge"``)."""
    return TIMINGS[carrier]


LINK = {
    "VERSION": (1, "protocol version in HELLO_ACK"),
    "SOF0": (0xA5, "first start byte"),
    "SOF1": (0x5A, "second start byte"),
    "ACK_BIT": (0x80, "set in the type of an answer"),
    "ERROR_TYPE": (0xFF, "type of an error answer"),
    "HEADER_BYTES": (6, "start bytes, type, seq, length (u16)"),
    "CRC_BYTES": (2, "CRC-16/CCITT-FALSE after the payload"),
    "MAX_STEPS": (64, "periods in one STEP request at most"),
    "STEP_IN_BYTES": (
        6,
        "bytes per period in a STEP request: the input record's u16 fields (vac, il, vbus; "
        "8 with split line sensing: vl, il, vbus, vn)",
    ),
    "STEP_OUT_BYTES": (
        7,
        "bytes per period in a STEP answer (compare u16, gates, mode, faults u16, status)",
    ),
    "MAX_PAYLOAD": (
        1 + 64 * 8,
        "largest payload: a count byte and MAX_STEPS periods of the widest record (a split "
        "sensing request, 8 bytes)",
    ),
    "SNAPSHOT_CHUNK": (256, "state bytes in one SNAPSHOT answer at most"),
    "DIGEST_CHARS": (16, "config digest characters in HELLO_ACK"),
    "COST_WORDS": (8, "u32 words in a COST answer"),
    "TICK_BITS": (24, "counter bits a step's tick difference is taken modulo"),
}
CRC_POLY = 0x1021  # CRC-16/CCITT-FALSE: poly 0x1021, init 0xFFFF, no reflection, no final xor
CRC_INIT = 0xFFFF


def sense_masks() -> dict[str, int]:
    """For each channel, the mask of the sense-fault bits that name it."""
    out = {c.name: 0 for c in Channel}
    for bit, chs in SENSE_CHANNEL.items():
        for ch in chs:
            out[ch.name] |= int(bit)
    return out


def link_value(name: str) -> int:
    return LINK[name][0]


def link_table(split: bool) -> dict[str, tuple[int, str]]:
    """The link's constants for a design: a STEP request carries its input record."""
    out = dict(LINK)
    out["STEP_IN_BYTES"] = (2 * len(adc_fields(split)), LINK["STEP_IN_BYTES"][1])
    return out


def macros() -> dict[str, int]:
    """Every integer macro the generated C must define from this module (without prefix)."""
    out: dict[str, int] = {}
    out.update({f"GATE_{g.name}": int(g) for g in Gate})
    out.update({f"MODE_{m.name}": int(m) for m in Mode})
    out.update({f"STATUS_{b.name}": int(b) for b in Status})
    out.update({f"FAULT_{f.name}": int(f) for f in Fault})
    out["FAULT_HISTORY"] = int(FAULT_HISTORY)
    out.update({f"SENSE_{f.name}": int(f) for f in SenseFault})
    out.update({f"SENSE_MASK_{k}": v for k, v in sense_masks().items()})
    out.update({f"CH_{c.name}": int(c) for c in Channel})
    out["ADC_CHANNELS"] = len(Channel)
    out.update({f"START_{e.name}": int(e) for e in Start})
    out.update({f"FORMAT_{k.upper()}": v for k, v in NUMBER_FORMATS.items()})
    out["PROBES"] = len(PROBES)
    out.update({f"REQ_{r.name}": int(r) for r in Request})
    out.update({f"LINKERR_{e.name}": int(e) for e in LinkErr})
    out.update({f"LINK_{k}": v for k, (v, _) in LINK.items()})
    out["LINK_CRC_POLY"] = CRC_POLY
    out["LINK_CRC_INIT"] = CRC_INIT
    return out
