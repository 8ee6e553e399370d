"""The host's credit flow and repair (session.Stream) with an injected clock: every time is a number
the test chooses, so the rules of hil/PROTOCOL.md ("Host", step 4) are checked without waiting and
whatever the machine's load."""

from __future__ import annotations

import pytest
from kinetab.generator import interface
from kinetab.hil import framing, messages, session

N_IN = messages.N_IN


def _rows(n: int) -> list[tuple[int, ...]]:
    return [tuple([k] * N_IN) for k in range(n)]


def _seqs(sent: list[messages.Message]) -> list[int]:
    return [m.seq for m in sent if isinstance(m, messages.Setpoint)]


def test_credit_is_free_slots_less_what_is_in_flight():
    """Send at most free - (last_sent - last_rx) (PROTOCOL.md, host step 4)."""
    s = session.Stream(rows=_rows(20), first_seq=1, free=4)
    assert _seqs(s.take(10, now=0.0)) == [1, 2, 3, 4]
    assert s.credit() == 0 and s.take(10, now=0.001) == []
    s.report(free=4, last_rx=2, now=0.002)  # two received (and consumed), two still in flight
    assert s.credit() == 2
    assert _seqs(s.take(10, now=0.002)) == [5, 6]
    s.report(free=0, last_rx=6, now=0.003)  # a full FIFO gives no credit, however much has arrived
    assert s.credit() == 0 and s.take(10, now=0.003) == []


def test_a_lost_setpoint_is_sent_again_once_reported_late_enough():
    """A sample that arrives RESEND_S or more after a setpoint was sent and still lacks it: send again
    from last_rx + 1; a report sooner than that is not yet evidence of a loss."""
    s = session.Stream(rows=_rows(10), first_seq=1, free=8)
    s.take(4, now=0.0)  # seq 1..4 sent at t = 0
    s.report(free=8, last_rx=1, now=0.5 * session.RESEND_S)
    s.repair(now=0.5 * session.RESEND_S)
    assert s.next_index == 4  # too soon: seq 2 may still be on its way
    s.report(free=8, last_rx=1, now=2 * session.RESEND_S)
    s.repair(now=2 * session.RESEND_S)
    assert s.next_index == 1  # from seq 2 again
    assert _seqs(s.take(3, now=3 * session.RESEND_S)) == [2, 3, 4]


def test_on_a_slow_link_setpoints_still_arriving_are_not_sent_again():
    """A slow link (an emulated UART, a low baud rate) takes many periods to carry a prefill: while each
    report shows setpoints received since the one before, the rest are in flight, not lost; a report
    showing none received (a lost frame stalls the sequence) sends again from the first missing."""
    s = session.Stream(rows=_rows(40), first_seq=1, free=32)
    s.take(32, now=0.0)
    for k, now in enumerate((0.05, 0.10, 0.15), start=1):  # three setpoints arrive per 50 ms period
        s.report(free=32, last_rx=3 * k, now=now)
        s.repair(now=now)
        assert s.next_index == 32, k  # long past RESEND_S, but arriving: no resend
    s.report(free=32, last_rx=9, now=0.20)  # nothing since the last report: seq 10 was lost
    s.repair(now=0.20)
    assert s.next_index == 9 and _seqs(s.take(2, now=0.2)) == [10, 11]


def test_after_a_resend_what_it_superseded_may_drain_before_the_next():
    """Frames sent before a resend keep arriving (and are dropped as out of order) for as long as the link
    takes to carry them: no second resend until they could have arrived at the fastest rate the link was
    seen to deliver, plus RESEND_S. On a fast link that is a few milliseconds."""
    frame = session.SETPOINT_FRAME_BYTES
    for bps in (1_000.0, 1_000_000.0):  # an emulated UART; a USB link
        s = session.Stream(rows=_rows(60), first_seq=1, free=40)
        s.take(40, now=0.0)
        s.report(free=40, last_rx=10, now=10 * frame / bps)  # ten frames delivered at `bps`
        t = 10 * frame / bps
        s.report(free=40, last_rx=10, now=t + 0.01)  # then a loss: no progress
        s.repair(now=t + 0.01)
        assert s.next_index == 10 and s.peak_bps == pytest.approx(bps)
        s.take(40, now=t + 0.01)  # seq 11..50 again: 40 frames superseded the 30 in flight
        drain = 30 * frame / bps + session.RESEND_S
        s.report(free=40, last_rx=10, now=t + 0.01 + 0.5 * drain)
        s.repair(now=t + 0.01 + 0.5 * drain)
        assert s.next_index == 50, bps  # the old frames may still be arriving: wait
        s.report(free=40, last_rx=10, now=t + 0.01 + 1.5 * drain)
        s.repair(now=t + 0.01 + 1.5 * drain)
        assert s.next_index == 10, bps  # long enough: the resend itself was lost, send again


def test_before_the_first_report_the_prefill_is_resent_after_a_quiet_spell():
    s = session.Stream(rows=_rows(10), first_seq=1, free=8)
    s.take(8, now=0.0)
    s.repair(now=0.5 * session.START_RESEND_S)
    assert s.next_index == 8
    s.repair(now=2 * session.START_RESEND_S)
    assert s.next_index == 0 and _seqs(s.take(8, now=0.2)) == list(range(1, 9))
    # still no report: the next resend waits twice as long (a slow link may still carry the prefill)
    s.repair(now=0.2 + 1.5 * session.START_RESEND_S)
    assert s.next_index == 8
    s.repair(now=0.2 + 2.5 * session.START_RESEND_S)
    assert s.next_index == 0
    # the first report measures the link from the first send, not from the resend
    s.take(8, now=0.3)
    s.report(free=8, last_rx=8, now=0.4)
    assert s.peak_bps == pytest.approx(8 * session.SETPOINT_FRAME_BYTES / 0.4)


def test_a_report_during_a_resend_acknowledges_what_arrived_before_it():
    """Regression (a slow controller, 50 ms ticks): the prefill was sent again before the first sample,
    which then reported every prefilled setpoint received while the resend was only part way. The host
    read last_rx as behind what it had sent, acknowledged nothing, and never sent past the FIFO."""
    s = session.Stream(rows=_rows(20), first_seq=1, free=8)
    s.take(8, now=0.0)
    s.repair(now=2 * session.START_RESEND_S)
    assert s.next_index == 0 and _seqs(s.take(3, now=0.11)) == [1, 2, 3]
    s.report(free=8, last_rx=8, now=0.12)  # all eight arrived (the first time round)
    assert s.acked == 7 and s.next_index == 8 and s.credit() == 8
    assert _seqs(s.take(8, now=0.13)) == list(range(9, 17))


def test_late_and_repeated_reports_never_move_the_acknowledgement_back():
    s = session.Stream(rows=_rows(10), first_seq=1, free=8)
    s.take(6, now=0.0)
    s.report(free=8, last_rx=6, now=0.01)  # all six received
    s.report(free=8, last_rx=3, now=0.02)  # an older sample arriving late
    assert s.acked == 5 and s.next_index == 6
    s.repair(now=0.03)
    assert s.next_index == 6  # nothing is missing: no resend


def test_sequence_numbers_wrap_and_the_last_setpoint_is_flagged():
    """u16 sequence numbers wrap from 65535 to 0; the final setpoint carries LAST, every one the
    stream's flags (here: no feed-forward, the wheels-up rig)."""
    s = session.Stream(rows=_rows(4), first_seq=65534, free=8, flags=messages.NO_FEEDFORWARD)
    sent = s.take(8, now=0.0)
    assert _seqs(sent) == [65534, 65535, 0, 1]
    flags = [m.flags for m in sent if isinstance(m, messages.Setpoint)]
    assert flags == [messages.NO_FEEDFORWARD] * 3 + [messages.NO_FEEDFORWARD | messages.LAST]
    s.report(free=8, last_rx=0, now=0.01)  # received up to the wrapped seq 0: row index 2
    assert s.acked == 2


class _ScriptedLink:
    """A link whose controller answers from a script: one list of messages per receive call."""

    def __init__(self, script: list[list[messages.Message]]) -> None:
        self.script, self.sent = script, []
        self.drops = framing.Drops()

    def send_many(self, msgs: list[messages.Message]) -> None:
        self.sent += msgs

    def receive(self, wait_s: float) -> list[messages.Message]:
        return self.script.pop(0) if self.script else []


def _sample(seq: int, free: int) -> messages.Sample:
    n_out, n_meas = len(interface.FF_OUT.columns), len(interface.MEASURED.columns)
    return messages.Sample(seq, seq, free, 0, 0, (0,) * n_out, (0,) * n_meas)


def test_a_fifo_that_runs_dry_halts_the_run_with_the_fault_named_and_the_samples_kept():
    """The controller found no setpoint at a tick (FIFO_DRY, PROTOCOL.md): the host stops with one line
    naming the fault, its sequence and how many samples arrived; the samples before it were all passed
    on, in order, and nothing after the fault is sent."""
    rows, seen = _rows(10), []
    link = _ScriptedLink([[_sample(1, 3), _sample(2, 4)], [messages.Fault(messages.FaultCode.FIFO_DRY, 3)]])
    stream = session.Stream(rows=rows, first_seq=1, free=2)
    counters = session.Counters()
    with pytest.raises(
        session.BenchFailed,
        match=r"^loop: the controller halted the motors: fifo dry \(code 2\) "
        r"at sequence 3, after 2 of 10 samples$",
    ):
        session._stream(
            link,  # type: ignore[arg-type]
            stream,
            on_sample=lambda k, s: seen.append((k, s.seq)),
            counters=counters,
            port_name="loop",
            safe=session.SafePoints(),
        )
    assert seen == [(0, 1), (1, 2)] and counters.samples == 2
    assert counters.faults == ["fifo dry (code 2) at sequence 3"]
    assert max(_seqs(link.sent)) <= 1 + 2 + 4  # never beyond the credit the samples gave


def test_a_deep_fifo_gets_at_most_a_window_of_setpoints_not_yet_known_received():
    """The controller takes setpoints in order and drops every one after a lost frame: with a 4096-deep
    FIFO and the whole plan sent ahead, each loss cost thousands of resent frames (17,599 frames for a
    3,000-row plan at 2 ms, then a dry FIFO). At most WINDOW are in flight; received ones free it."""
    s = session.Stream(rows=_rows(3000), first_seq=1, free=4096)
    assert len(s.take(4000, now=0.0)) == session.WINDOW
    assert s.take(4000, now=0.001) == []
    s.report(free=4096 - 100, last_rx=100, now=0.002)  # 100 received (still in the FIFO)
    assert _seqs(s.take(4000, now=0.002)) == list(range(session.WINDOW + 1, session.WINDOW + 101))


def test_the_host_is_never_silent_for_half_the_watchdog_while_it_waits_to_resend():
    """Before the first sample the wait before resending doubles (a slow link may still carry the
    prefill), and after a resend the host holds back while superseded frames drain; neither may reach
    the controller's watchdog, which halts it (seen at a 2 ms period: 'watchdog' after 57 samples)."""
    s = session.Stream(rows=_rows(300), first_seq=1, free=64, watchdog_s=0.1)
    s.take(64, now=0.0)
    for k in range(6):  # no report ever: resends come at most 50 ms (half the watchdog) apart
        last = s.sent_at[s.next_index - 1]
        s.repair(now=last + 0.051)
        assert s.next_index == 0, k
        s.take(64, now=last + 0.051)
    s = session.Stream(rows=_rows(300), first_seq=1, free=64, watchdog_s=0.1)
    s.take(64, now=0.0)
    s.report(free=64, last_rx=1, now=0.002)  # a very slow link so far: superseded frames would take long
    s.report(free=64, last_rx=1, now=0.02)  # no progress: seq 2 lost
    s.repair(now=0.02)
    assert s.next_index == 1 and s.hold_until <= 0.02 + 0.05
