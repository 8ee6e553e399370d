"""The host side of a bench run: handshake, arm, stream setpoints with credit flow control, collect one
sample per setpoint, and halt the motors on every way out.

The controller owns the clock and consumes one setpoint per tick; the host only keeps its FIFO topped
up from the free-slot count each sample reports, so host and USB jitter never reach the motors.
"""

from __future__ import annotations

import math
import signal
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

import serial
from kinetab.generator.errors import CheckFailed

from . import framing, messages
from .messages import FaultCode

ANSWER_TIMEOUT_S = 2.0  # no frame from the controller this long while running: it stopped answering
HELLO_TRIES = 3
HELLO_WAIT_S = 1.0
RESEND_S = 0.005  # a setpoint the controller reports missing this long after it was sent is sent again
SETPOINT_FRAME_BYTES = len(framing.frame(messages.encode(messages.Setpoint(0xFFFF, 0xFF, (-1,) * messages.N_IN))))
"""Bytes of one setpoint frame on the wire, near enough (COBS may add a byte or two) for rate estimates."""
START_RESEND_S = 0.05  # before the first sample: no report yet, so resend the prefill after this long (doubling)
PREFILL_MAX = 64  # the run starts after half the FIFO or this many setpoints; a deep FIFO fills as it runs
WINDOW = 2 * PREFILL_MAX  # setpoints sent and not yet known received, at most (Stream.credit)


class BenchFailed(CheckFailed):
    """A bench run that could not start or did not complete (exit 1)."""


@dataclass
class Counters:
    """What the run has seen so far (for the progress line and the log's side file)."""

    sent: int = 0
    samples: int = 0
    fifo_free: int = 0
    fifo_depth: int = 0
    missing: int = 0  # samples lost on the way (their rows have no measurement)
    faults: list[str] = field(default_factory=list)


class Link:
    """Frames and messages over an open pyserial port; bad frames are counted, never raised; a port
    that fails (unplugged, the other side closed) is BenchFailed naming it."""

    def __init__(self, port: Any) -> None:
        self.port = port
        self.reader = framing.FrameReader()

    @property
    def drops(self) -> framing.Drops:
        return self.reader.drops

    @contextmanager
    def _port_errors(self) -> Iterator[None]:
        try:
            yield
        except (serial.SerialException, OSError) as exc:
            name = getattr(self.port, "port", None) or "the port"
            raise BenchFailed(f"{name}: the link was lost (unplugged, or the controller closed it): {exc}") from None

    def send(self, msg: messages.Message) -> None:
        self.send_many([msg])

    def send_many(self, msgs: list[messages.Message]) -> None:
        if msgs:
            with self._port_errors():
                self.port.write(b"".join(framing.frame(messages.encode(m)) for m in msgs))

    def receive(self, wait_s: float) -> list[messages.Message]:
        """Messages that arrived, waiting up to wait_s for the first bytes."""
        with self._port_errors():
            self.port.timeout = wait_s
            data = self.port.read(max(1, self.port.in_waiting))
            if data and self.port.in_waiting:
                data += self.port.read(self.port.in_waiting)
        out = []
        for payload in self.reader.feed(data):
            msg = messages.decode(payload)
            if isinstance(msg, str):
                setattr(self.drops, msg, getattr(self.drops, msg) + 1)
            else:
                out.append(msg)
        return out


def handshake(link: Link, port_name: str) -> messages.Identify:
    """HELLO until the controller identifies itself; BenchFailed when nothing answers."""
    for _ in range(HELLO_TRIES):
        link.send(messages.Hello())
        deadline = time.monotonic() + HELLO_WAIT_S
        while time.monotonic() < deadline:
            for msg in link.receive(0.05):
                if isinstance(msg, messages.Identify):
                    return msg
    raise BenchFailed(
        f"{port_name}: nothing answers: no identify message after {HELLO_TRIES} hellos "
        f"({HELLO_TRIES * HELLO_WAIT_S:g} s); check the port, the cable and the controller"
    )


def check_identity(ident: messages.Identify, fingerprint: int, port_name: str, *, lift: bool = False) -> None:
    """Stop before arming when the controller speaks another protocol or runs another model; a lift
    plan needs the version that added the lift's messages."""
    spoken = " and ".join(str(v) for v in messages.SPOKEN)
    if ident.version not in messages.SPOKEN:
        raise BenchFailed(
            f"{port_name}: the controller speaks bench protocol {ident.version}, this kinetab "
            f"speaks {spoken}; regenerate the link files or update kinetab"
        )
    if lift and ident.version < messages.LIFT_VERSION:
        raise BenchFailed(
            f"{port_name}: the controller speaks bench protocol {ident.version}, which has no lift messages "
            f"(version {messages.LIFT_VERSION} added them); regenerate the link files from the model with [lift]"
        )
    if ident.fingerprint != fingerprint:
        raise BenchFailed(
            f"{port_name}: fingerprint mismatch: the controller runs 0x{ident.fingerprint:08X}, the "
            f"model is 0x{fingerprint:08X}; rebuild and flash the firmware from this model"
        )


def check_period(ident: messages.Identify, plan_period_s: float | None, port_name: str, plan_name: str) -> None:
    """Stop before arming when the plan's rows are not one per control period of this controller: the
    controller consumes one row per tick, so the motion would run slower or faster than planned."""
    if plan_period_s is None or abs(plan_period_s * 1e6 - ident.period_us) <= 1e-3 * ident.period_us:
        return
    raise BenchFailed(
        f"{port_name}: the controller ticks every {ident.period_us / 1000:g} ms, {plan_name} has a row every "
        f"{plan_period_s * 1000:g} ms; make the plan with `kinetab bench plan --period {ident.period_us / 1000:g}`, "
        f"or give the controller that period (`kinetab bench simulate --period {plan_period_s * 1000:g}` for the "
        "simulated one)"
    )


Rows = list[tuple[int, ...]]  # setpoints: the feed-forward input columns (interface.ff_in), firmware steps


@dataclass
class Stream:
    """Credit flow control and repair: how many setpoints may be sent now without overflowing the
    FIFO, and sending again from the controller's last received setpoint when one was lost."""

    rows: Rows
    first_seq: int
    next_index: int = 0  # the next row to send
    free: int = 0  # free slots the controller last reported
    acked: int = -1  # index of the newest setpoint the controller had received then
    heard_at: float | None = None  # when the controller last reported (None: not yet)
    progressed: bool = False  # the last report showed setpoints received since the one before
    peak_bps: float = 0.0  # the fastest the link was seen to deliver setpoints, bytes per second
    hold_until: float = 0.0  # no resend before this: what the last resend superseded may still be arriving
    start_resends: int = 0  # resends before the first report (each waits twice as long as the one before)
    first_sent_at: float | None = None  # when the first setpoint was first sent (a resend does not move it)
    sent_at: list[float] = field(default_factory=list)
    flags: int = 0  # flags every setpoint carries (messages.NO_FEEDFORWARD)
    lift: bool = False  # the rows are the lift's (LIFT_SETPOINT), not the drive's
    watchdog_s: float = math.inf  # the controller's watchdog (IDENTIFY): a silence this long halts it

    def credit(self) -> int:
        """Free slots less the setpoints sent since the report, and never more than WINDOW not yet known
        received: a lost frame makes the controller drop every later one (it takes them in order), so
        on a deep FIFO an unbounded window resends thousands of frames per loss and falls behind."""
        in_flight = self.next_index - 1 - self.acked
        return max(0, min(self.free, WINDOW) - in_flight)

    def report(self, free: int, last_rx: int, now: float) -> None:
        """A sample's free slots and last received sequence number (unwrapped near what was sent)."""
        self.free = free
        sent = len(self.sent_at)  # rows sent at least once: last_rx is never beyond them, even mid-resend
        behind = (self.first_seq + sent - 1 - last_rx) & 0xFFFF
        before = self.acked
        self.acked = max(self.acked, sent - 1 - behind)
        self.progressed = self.acked > before
        since = self.heard_at if self.heard_at is not None else self.first_sent_at
        if self.progressed and since is not None and now > since:  # the first report: since the first send
            self.peak_bps = max(self.peak_bps, (self.acked - before) * SETPOINT_FRAME_BYTES / (now - since))
        self.next_index = max(self.next_index, self.acked + 1)  # never send again what has arrived
        self.heard_at = now

    def repair(self, now: float) -> None:
        """Go back to the first setpoint not received when the controller, reporting at least RESEND_S
        after it was sent, still lacks it and received nothing since its report before: a lost frame
        stalls the controller's sequence, while on a slow link (a low baud rate, an emulator) setpoints
        still in flight keep arriving and are not sent again. Before its first report (a deep FIFO's
        prefill can take longer than RESEND_S to send) only when nothing has been sent for
        START_RESEND_S, well within the controller's watchdog, then twice as long each time (a slow link
        may still be carrying the prefill), but never longer than half the watchdog: a prefill frame
        lost twice must not leave the controller silent until it halts. After a resend, not again until what it
        superseded could have arrived at the fastest rate the link was seen to deliver (plus RESEND_S):
        frames still on their way are dropped as out of order and show no progress meanwhile."""
        first_missing = self.acked + 1
        if first_missing >= self.next_index:
            return
        if self.heard_at is None:
            wait = min(START_RESEND_S * 2**self.start_resends, self.watchdog_s / 2)  # never past its watchdog
            due = now - self.sent_at[self.next_index - 1] > wait
            self.start_resends += due
        else:
            due = not self.progressed and self.heard_at - self.sent_at[first_missing] > RESEND_S
        if due and now >= self.hold_until:
            superseded = (self.next_index - first_missing) * SETPOINT_FRAME_BYTES
            drain = superseded / self.peak_bps if self.peak_bps > 0 else 0.0
            self.hold_until = now + min(RESEND_S + drain, self.watchdog_s / 2)  # silent no longer than that
            self.next_index = first_missing

    def take(self, most: int, now: float) -> list[messages.Message]:
        n = min(self.credit(), most, len(self.rows) - self.next_index)
        if n and self.first_sent_at is None:
            self.first_sent_at = now
        out: list[messages.Message] = []
        for k in range(self.next_index, self.next_index + n):
            flags = self.flags | (messages.LAST if k == len(self.rows) - 1 else 0)
            kind = messages.LiftSetpoint if self.lift else messages.Setpoint
            out.append(kind((self.first_seq + k) & 0xFFFF, flags, self.rows[k]))
            if k < len(self.sent_at):
                self.sent_at[k] = now
            else:
                self.sent_at.append(now)
        self.next_index += n
        return out


def run(
    link: Link,
    rows: Rows,
    *,
    ident: messages.Identify,
    on_sample: Callable[[int, Any], None],
    counters: Counters,
    port_name: str,
    flags: int = 0,
    lift: bool = False,
) -> str:
    """Arm and stream every row (each setpoint with `flags`); calls on_sample(row index, sample) for each
    sample in order (a sample lost on the way is counted and skipped). Returns "completed" or raises
    BenchFailed; the caller sends HALT on every way out."""
    first = 1
    stream = Stream(rows=rows, first_seq=first, flags=flags, watchdog_s=ident.watchdog_ms / 1000, lift=lift)
    armed = _arm(link, min(max(1, ident.fifo_depth // 2), PREFILL_MAX, len(rows)), port_name)
    stream.free, counters.fifo_depth, counters.fifo_free = armed.free, ident.fifo_depth, armed.free
    with SafePoints() as safe:
        return _stream(link, stream, on_sample=on_sample, counters=counters, port_name=port_name, safe=safe)


def _stream(
    link: Link,
    stream: Stream,
    *,
    on_sample: Callable[[int, Any], None],
    counters: Counters,
    port_name: str,
    safe: SafePoints,
) -> str:
    """The streaming loop of run(); Ctrl-C and SIGTERM take effect at its top, between samples."""
    rows, first = stream.rows, stream.first_seq
    expected, last_heard = 0, time.monotonic()
    while True:
        safe.check()
        now = time.monotonic()
        stream.repair(now)
        link.send_many(stream.take(32, now))
        counters.sent = max(counters.sent, stream.next_index)
        msgs = link.receive(0.002)
        if msgs:
            last_heard = time.monotonic()
        elif time.monotonic() - last_heard > ANSWER_TIMEOUT_S:
            raise BenchFailed(
                f"{port_name}: the controller stopped answering ({ANSWER_TIMEOUT_S:g} s without a frame) "
                f"after {expected} of {len(rows)} samples"
            )
        for msg in msgs:
            if isinstance(msg, messages.Sample | messages.LiftSample):
                ahead = (msg.seq - first - expected) & 0xFFFF
                if ahead >= 0x8000 or expected + ahead >= len(rows):
                    link.drops.out_of_order += 1  # a repeat, or nothing we sent
                    continue
                counters.missing += ahead
                expected += ahead
                on_sample(expected, msg)  # a signal waits for safe.check(): the log row and the count agree
                counters.samples, counters.fifo_free = counters.samples + 1, msg.free
                expected += 1
                stream.report(msg.free, msg.last_rx, now)
            elif isinstance(msg, messages.Fault):
                if msg.code == FaultCode.END and msg.seq == (first + len(rows) - 1) & 0xFFFF:
                    counters.missing += len(rows) - expected  # the last samples lost on the way
                    return "completed"
                return _on_fault(msg, expected, len(rows), counters, port_name=port_name)


class SafePoints:
    """SIGINT and SIGTERM recorded while streaming and delivered at check(), between samples, so a log
    row and the sample count never part. Masking the signals around each row was not enough: a signal
    that reached the process just before the mask still ran its Python handler inside the block (seen
    once in CI: 1,950 rows, 1,949 counted). Outside the main thread (tests, libraries) it does nothing."""

    def __init__(self) -> None:
        self.pending: list[int] = []
        self.previous: dict[int, Any] = {}

    def __enter__(self) -> SafePoints:
        if threading.current_thread() is threading.main_thread():
            self.previous = {s: signal.signal(s, self._record) for s in (signal.SIGINT, signal.SIGTERM)}
        return self

    def _record(self, signum: int, _frame: Any) -> None:
        self.pending.append(signum)

    def check(self) -> None:
        """Deliver a recorded signal now, to the handler that was in place before (it may raise)."""
        if self.pending:
            self._restore()
            signal.raise_signal(self.pending.pop(0))

    def _restore(self) -> None:
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)
        self.previous = {}

    def __exit__(self, exc_type: type[BaseException] | None, *_exc: object) -> None:
        self._restore()
        if self.pending and exc_type is None:  # arrived after the last check: deliver it now
            signal.raise_signal(self.pending.pop(0))


def _arm(link: Link, prefill: int, port_name: str) -> messages.Armed:
    """ARM (again, when the answer is lost) until ARMED; BenchFailed when refused or unanswered."""
    for _ in range(HELLO_TRIES):
        link.send(messages.Arm(1, prefill))
        try:
            return _await_armed(link, port_name, HELLO_WAIT_S)
        except TimeoutError:
            continue
    raise BenchFailed(f"{port_name}: no answer to arm after {HELLO_TRIES} tries")


def _await_armed(link: Link, port_name: str, wait_s: float) -> messages.Armed:
    deadline = time.monotonic() + wait_s
    while time.monotonic() < deadline:
        for msg in link.receive(0.05):
            if isinstance(msg, messages.Armed):
                return msg
            if isinstance(msg, messages.Fault) and msg.code != FaultCode.HALT:
                raise BenchFailed(f"{port_name}: the controller refused to arm: {fault_text(msg)}")
    raise TimeoutError


def fault_text(msg: messages.Fault) -> str:
    name = FaultCode(msg.code).name.lower().replace("_", " ") if msg.code in FaultCode._value2member_map_ else "unknown"
    return f"{name} (code {msg.code}) at sequence {msg.seq}"


def _on_fault(msg: messages.Fault, received: int, total: int, counters: Counters, *, port_name: str) -> str:
    text = fault_text(msg)
    counters.faults.append(text)
    raise BenchFailed(f"{port_name}: the controller halted the motors: {text}, after {received} of {total} samples")
