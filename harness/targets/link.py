"""The lockstep link between the harness and a controller running on a target.

Frame (all integers little-endian):

    0xA5 0x5A | type u8 | seq u8 | len u16 | payload (len bytes) | crc u16

``crc`` is CRC-16/CCITT-FALSE (poly 0x1021, init 0xFFFF) over type..payload.  The host
numbers its requests; the target answers each with the same ``seq``.  Types:

    HELLO 0x01 / HELLO_ACK 0x81   ack: version u8, format u8 (0 float32, 1 q15),
                                  sizeof ctrl u16, digest (16 ASCII hex), prefix (ASCII)
    RESET 0x02 / RESET_ACK 0x82   the controller is re-initialised (refused while it is latched
                                  or in a sensor fault)
    STEP  0x03 / STEP_ACK  0x83   step: n u8, then n x (vac u16, il u16, vbus u16), or with
                                  split line sensing n x (vl, il, vbus, vn u16);
                                  ack:  n u8, then n x (compare u16, gates u8, mode u8,
                                        faults u16, status u8)
    SNAPSHOT 0x04 / 0x84          request: offset u16; ack: state size u16, offset u16, then up
                                  to 256 bytes of the controller state from that offset (raw,
                                  in the target's own layout)
    COST  0x05 / COST_ACK  0x85   request: empty, or 1 u8 to clear the counts after answering;
                                  ack: 8 x u32: steps, tick sum (low, high), max, min, ticks of
                                  an empty measurement, calibration instructions and ticks
    ERROR 0xFF                    payload: code u8 (1 bad length, 2 unknown type, 3 refused:
                                  RESET of a latched or sensor-faulted controller)

The decoder reads a byte stream, resynchronises on the start bytes after any damage and
reports what it dropped, so corruption, truncation, duplication and reordering are all
detected: a frame is accepted only whole, with a good CRC, and the host checks that each
answer carries the sequence number and type it expects.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, field

from design.contract import CRC_INIT, CRC_POLY, NUMBER_FORMATS, LinkErr, Request, link_value

SOF = bytes([link_value("SOF0"), link_value("SOF1")])
VERSION = link_value("VERSION")
HELLO, RESET, STEP, SNAPSHOT, COST = (int(r) for r in Request)
ERROR = link_value("ERROR_TYPE")
SNAPSHOT_CHUNK = link_value("SNAPSHOT_CHUNK")
ACK = link_value("ACK_BIT")
MAX_PAYLOAD = link_value("MAX_PAYLOAD")
STEP_OUT_BYTES = link_value("STEP_OUT_BYTES")
MAX_STEPS_PER_FRAME = link_value("MAX_STEPS")
DIGEST_CHARS = link_value("DIGEST_CHARS")
FORMAT_NAMES = {code: name for name, code in NUMBER_FORMATS.items()}


class LinkError(RuntimeError):
    """The target answered wrongly (or not at all): the message says how."""


def crc16(data: bytes) -> int:
    """CRC-16/CCITT-FALSE: poly 0x1021, init 0xFFFF, no reflection, no final xor (check 0x29B1)."""
    crc = CRC_INIT
    for b in data:
        crc ^= b << 8
        for _ in range(8):
            crc = ((crc << 1) ^ CRC_POLY) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
    return crc


def encode(ftype: int, seq: int, payload: bytes = b"") -> bytes:
    if len(payload) > MAX_PAYLOAD:
        raise ValueError(f"payload of {len(payload)} bytes exceeds {MAX_PAYLOAD}")
    body = struct.pack("<BBH", ftype, seq & 0xFF, len(payload)) + payload
    return SOF + body + struct.pack("<H", crc16(body))


@dataclass(frozen=True)
class Frame:
    ftype: int
    seq: int
    payload: bytes


@dataclass
class Decoder:
    """Feed bytes, take whole frames; ``dropped`` counts bytes discarded while resynchronising
    and ``bad_crc`` the frames rejected for their checksum."""

    buf: bytearray = field(default_factory=bytearray)
    dropped: int = 0
    bad_crc: int = 0

    def feed(self, data: bytes) -> list[Frame]:
        self.buf += data
        out = []
        while True:
            i = self.buf.find(SOF)
            if i < 0:
                keep = 1 if self.buf.endswith(SOF[:1]) else 0
                self.dropped += len(self.buf) - keep
                del self.buf[: len(self.buf) - keep]
                return out
            if i:
                self.dropped += i
                del self.buf[:i]
            if len(self.buf) < 6:
                return out
            ftype, seq, n = struct.unpack_from("<BBH", self.buf, 2)
            if n > MAX_PAYLOAD:
                self.dropped += 1
                del self.buf[:1]
                continue
            if len(self.buf) < 8 + n:
                return out
            body = bytes(self.buf[2 : 6 + n])
            (crc,) = struct.unpack_from("<H", self.buf, 6 + n)
            if crc != crc16(body):
                self.bad_crc += 1
                self.dropped += 1
                del self.buf[:1]
                continue
            out.append(Frame(ftype, seq, body[4:]))
            del self.buf[: 8 + n]


def step_payload(codes) -> bytes:
    """n x (the input record's counts: vac, il, vbus; or vl, il, vbus, vn) -> STEP payload."""
    rows = [tuple(int(x) for x in r) for r in codes]
    if not 1 <= len(rows) <= MAX_STEPS_PER_FRAME:
        raise ValueError(f"1..{MAX_STEPS_PER_FRAME} periods per frame, not {len(rows)}")
    fmt = "<" + "H" * len(rows[0])
    return bytes([len(rows)]) + b"".join(struct.pack(fmt, *r) for r in rows)


def parse_step_ack(payload: bytes) -> list[tuple[int, int, int, int, int]]:
    """(compare, gates, mode, faults, status) per period."""
    if not payload or len(payload) != 1 + STEP_OUT_BYTES * payload[0]:
        raise LinkError(f"STEP_ACK of {len(payload)} bytes does not hold its count of outputs")
    return [
        struct.unpack_from("<HBBHB", payload, 1 + STEP_OUT_BYTES * k) for k in range(payload[0])
    ]


@dataclass(frozen=True)
class Hello:
    version: int
    number_format: str
    state_size_B: int
    digest: str
    prefix: str


def parse_hello(payload: bytes) -> Hello:
    end = 4 + DIGEST_CHARS
    if len(payload) < end:
        raise LinkError(f"HELLO_ACK of {len(payload)} bytes is too short")
    version, fmt, size = struct.unpack_from("<BBH", payload, 0)
    return Hello(
        version,
        FORMAT_NAMES.get(fmt, f"unknown format {fmt}"),
        size,
        payload[4:end].decode("ascii", "replace"),
        payload[end:].decode("ascii", "replace"),
    )


@dataclass(frozen=True)
class Cost:
    """Step cost counts from the target, in its counter's ticks (see COST above)."""

    steps: int
    tick_sum: int
    tick_max: int
    tick_min: int
    tick_empty: int
    calib_instructions: int
    calib_ticks: int

    def instructions(self) -> dict | None:
        """Instructions per step (mean, max, min) and the resolution, from the calibration;
        None when the target has no counter or ran no step."""
        if not (self.steps and self.calib_ticks and self.calib_instructions):
            return None
        per_tick = self.calib_instructions / self.calib_ticks
        net = lambda ticks: max(ticks - self.tick_empty, 0) * per_tick  # noqa: E731
        return {
            "steps": self.steps,
            "mean": (self.tick_sum / self.steps - self.tick_empty) * per_tick,
            "max": net(self.tick_max),
            "min": net(self.tick_min),
            "instructions_per_tick": per_tick,
            "resolution": per_tick,
            "empty_measurement_ticks": self.tick_empty,
        }


def parse_cost(payload: bytes) -> Cost:
    if len(payload) != 32:
        raise LinkError(f"COST_ACK of {len(payload)} bytes, expected 32")
    steps, lo, hi, mx, mn, empty, ci, ct = struct.unpack("<8I", payload)
    return Cost(steps, lo | (hi << 32), mx, mn if steps else 0, empty, ci, ct)


class Session:
    """Host side of the link over a byte transport with ``write(bytes)`` and
    ``read(timeout_s) -> bytes`` (empty on timeout)."""

    def __init__(self, transport, timeout_s: float = 2.0, retries: int = 2):
        self.t = transport
        self.timeout_s = timeout_s
        self.retries = retries
        self.seq = 0
        self.dec = Decoder()
        self.pending: list[Frame] = []
        self.stats = {
            "frames_sent": 0,
            "frames_received": 0,
            "retries": 0,
            "bytes_dropped": 0,
            "bad_crc": 0,
        }

    def _receive(self, want_type: int, seq: int) -> Frame:
        import time

        deadline = time.monotonic() + self.timeout_s
        while True:
            while self.pending:
                f = self.pending.pop(0)
                self.stats["frames_received"] += 1
                if f.seq != seq:
                    # an old answer (duplicate or late): not ours, skip it
                    continue
                if f.ftype == ERROR:
                    if f.payload[:1] == bytes([LinkErr.REFUSED]):
                        raise LinkError(
                            f"target refused request {seq}: its controller is latched or in a "
                            "sensor fault, which only the board's fault-clear request leaves "
                            "(or a shell built with -D<PREFIX>_LINK_RESET_CLEARS_FAULTS=1)"
                        )
                    raise LinkError(
                        f"target reported error {f.payload[:1].hex()} for request {seq}"
                    )
                if f.ftype != want_type:
                    raise LinkError(
                        f"expected frame type 0x{want_type:02x}, got 0x{f.ftype:02x} (seq {seq})"
                    )
                return f
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError(f"no answer to request {seq} within {self.timeout_s:g} s")
            data = self.t.read(left)
            self.pending += self.dec.feed(data)
            self.stats["bytes_dropped"] = self.dec.dropped
            self.stats["bad_crc"] = self.dec.bad_crc

    def request(self, ftype: int, payload: bytes = b"") -> Frame:
        self.seq = (self.seq + 1) & 0xFF
        frame = encode(ftype, self.seq, payload)
        for attempt in range(self.retries + 1):
            self.t.write(frame)
            self.stats["frames_sent"] += 1
            try:
                return self._receive(ftype | ACK, self.seq)
            except TimeoutError:
                if attempt == self.retries:
                    raise
                self.stats["retries"] += 1
        raise AssertionError("unreachable")

    def hello(self) -> Hello:
        return parse_hello(self.request(HELLO).payload)

    def reset(self) -> None:
        self.request(RESET)

    def snapshot(self) -> bytes:
        """The controller state's raw bytes, in pieces of at most 256."""
        data = b""
        while True:
            f = self.request(SNAPSHOT, struct.pack("<H", len(data)))
            if len(f.payload) < 4:
                raise LinkError(f"SNAPSHOT_ACK of {len(f.payload)} bytes is too short")
            size, off = struct.unpack_from("<HH", f.payload)
            chunk = f.payload[4:]
            if off != len(data) or len(chunk) != min(SNAPSHOT_CHUNK, size - off):
                raise LinkError(
                    f"SNAPSHOT_ACK for offset {off} with {len(chunk)} bytes, asked offset "
                    f"{len(data)} "
                    f"of {size}"
                )
            data += chunk
            if len(data) >= size:
                return data

    def cost(self, clear: bool = False) -> Cost:
        return parse_cost(self.request(COST, b"\x01" if clear else b"").payload)

    def step(self, codes) -> list[tuple[int, int, int, int]]:
        out = parse_step_ack(self.request(STEP, step_payload(codes)).payload)
        if len(out) != len(codes):
            raise LinkError(f"sent {len(codes)} periods, got {len(out)} outputs")
        return out
