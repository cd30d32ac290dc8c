"""Byte transports of the lockstep link (each ``write(bytes)``, ``read(timeout_s) -> bytes``,
``close()``): ``PipeTransport`` (a child's stdin/stdout: the host port) and
``SerialTransport`` (pyserial: a real port such as ``/dev/ttyUSB0``, a pseudo-terminal, or
any pyserial URL such as ``socket://127.0.0.1:4000``; a TCP serial server should send small
writes at once, e.g. QEMU's ``-serial tcp:...,server=on,nodelay=on``, or every answer waits
for a delayed acknowledgement).
"""

from __future__ import annotations

import contextlib
import os
import select
import socket
import subprocess

from . import link


class PipeTransport:
    """Bytes to and from a child process's stdin/stdout."""

    def __init__(self, proc: subprocess.Popen):
        self.proc = proc
        self.fd = proc.stdout.fileno()
        os.set_blocking(self.fd, False)

    def write(self, data: bytes) -> None:
        try:
            self.proc.stdin.write(data)
            self.proc.stdin.flush()
        except BrokenPipeError:
            raise link.LinkError("the target process has exited") from None

    def read(self, timeout_s: float) -> bytes:
        r, _, _ = select.select([self.fd], [], [], max(timeout_s, 0.0))
        if not r:
            return b""
        try:
            data = os.read(self.fd, 65536)
        except BlockingIOError:
            return b""
        if not data and self.proc.poll() is not None:
            raise link.LinkError(f"the target process exited with status {self.proc.returncode}")
        return data

    def close(self) -> None:
        with contextlib.suppress(OSError):
            self.proc.stdin.close()
        stop_process(self.proc)


class SerialTransport:
    """A serial port through pyserial: a device path (``/dev/ttyUSB0``, a pseudo-terminal)
    or a pyserial URL (``socket://HOST:PORT``, ``rfc2217://...``); 8N1, no flow control."""

    def __init__(self, port: str, baud: int = 115200, proc: subprocess.Popen | None = None):
        import serial

        try:
            self.ser = serial.serial_for_url(port, baudrate=baud, timeout=0.0, write_timeout=2.0)
        except (serial.SerialException, ValueError) as exc:
            raise link.LinkError(
                f"cannot open serial port {port!r} at {baud} baud: {exc}"
            ) from None
        self.ser.reset_input_buffer()
        sock = getattr(
            self.ser, "_socket", None
        )  # a socket:// port: one frame per request, send it now
        if sock is not None:
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self.port, self.baud, self.proc = port, baud, proc

    def write(self, data: bytes) -> None:
        import serial

        try:
            self.ser.write(data)
            self.ser.flush()
        except serial.SerialException as exc:
            raise link.LinkError(f"write to {self.port} failed: {exc}") from None

    def read(self, timeout_s: float) -> bytes:
        import serial

        try:
            self.ser.timeout = max(timeout_s, 0.0)
            first = self.ser.read(1)  # waits up to the timeout for the first byte
            if not first:
                if self.proc is not None and self.proc.poll() is not None:
                    raise link.LinkError(
                        f"the target process exited with status {self.proc.returncode}"
                    )
                return b""
            return first + self.ser.read(self.ser.in_waiting)
        except serial.SerialException as exc:
            raise link.LinkError(f"read from {self.port} failed: {exc}") from None

    def close(self) -> None:
        try:
            self.ser.close()
        finally:
            if self.proc is not None:
                stop_process(self.proc)


def stop_process(proc: subprocess.Popen) -> None:
    """Terminate a child, then kill it if it does not exit within 2 s."""
    if proc.poll() is None:
        proc.terminate()
    try:
        proc.wait(timeout=2.0)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()
