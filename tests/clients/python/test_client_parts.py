"""The Python client's parts without a daemon: the receive buffer, the band hold, the clock estimate from
ping round trips, addresses and exceptions. Values are known by construction."""

import asyncio

import pytest

from pitchwire_client import (BandTimeout, ConnectionLost, DaemonUnreachable, ForbiddenError, Frame, Hello,
                              PitchwireError, Reconnected, RequestError, Settled, Stats, TokenRefused, resolve_url)
from pitchwire_client import _buffer
from pitchwire_client.band import HoldTracker
from pitchwire_client.clock import ClockEstimator
from pitchwire_client.errors import request_error
from pitchwire_client.messages import Event, Marker, parse_stream_message

HOP_S = 0.005


def frame(index, f0):
    return Frame(index, round(index * HOP_S, 6), f0, None, None, None, index + 1, 0.0, {})


def notice():
    hello = Hello.from_json({"type": "hello", "role": "observer"})
    return Reconnected(lost_at=1.0, back_at=2.0, attempts=1, new_audio_clock=False, hello=hello)


def event(kind="band_crossing"):
    return Event(kind, 1.0, {}, None, 1, 0.0, {})


def stats(t):
    return Stats.from_json({"type": "stats", "seq": 1, "time_s": t, "window_s": 5.0}, 0.0)


# ---- the receive buffer -------------------------------------------------------------------------------

def test_buffer_drops_oldest_frames_and_counts_them_never_events():
    b = _buffer.ThreadBuffer(max_frames=3, max_stats=2)
    for i in range(5):
        b.put(frame(i, 200.0))
        b.put(event())
    assert b.dropped_frames == 2
    assert b.pending() == {"frames": 3, "stats": 0, "events": 5}
    got = []
    while True:
        try:
            got.append(b.get(timeout=0))
        except TimeoutError:
            break
    # Arrival order is kept; the frames left are the newest three.
    assert [m.index for m in got if isinstance(m, Frame)] == [2, 3, 4]
    assert sum(isinstance(m, Event) for m in got) == 5
    assert isinstance(got[0], Event)  # the event that came before frame 2 comes before it


def test_buffer_bounds_stats_separately():
    b = _buffer.ThreadBuffer(max_frames=10, max_stats=2)
    for t in (0.5, 1.0, 1.5):
        b.put(stats(t))
    assert b.dropped_stats == 1 and b.dropped_frames == 0
    assert [b.get(("stats",), 0).time_s for _ in range(2)] == [1.0, 1.5]


def test_buffer_notice_reaches_each_stream_once_and_is_never_dropped():
    b = _buffer.ThreadBuffer(max_frames=2, max_stats=2)
    b.put(frame(0, 200.0))
    n = notice()
    b.put(n)
    for i in range(1, 5):
        b.put(frame(i, 200.0))
    b.put(event())
    # frames: the notice stays, the oldest frames go around it.
    assert b.get(("frames",), 0) is n
    assert [b.get(("frames",), 0).index for _ in range(2)] == [3, 4]
    # events and stats each see the notice too, once.
    assert b.get(("events",), 0) is n
    assert isinstance(b.get(("events",), 0), Event)
    assert b.get(("stats",), 0) is n
    with pytest.raises(TimeoutError):
        b.get(("stats",), 0)


def test_buffer_messages_yields_a_notice_once():
    b = _buffer.ThreadBuffer(max_frames=10, max_stats=10)
    b.put(frame(0, 200.0))
    b.put(notice())
    b.put(event())
    kinds = [type(b.get(timeout=0)).__name__ for _ in range(3)]
    assert kinds == ["Frame", "Reconnected", "Event"]
    with pytest.raises(TimeoutError):
        b.get(timeout=0)


def test_buffer_end_delivers_what_is_queued_then_the_error():
    b = _buffer.ThreadBuffer(max_frames=10, max_stats=10)
    b.put(frame(0, 200.0))
    b.end(ConnectionLost("gone", close_code=1001))
    assert b.get(timeout=0).index == 0
    with pytest.raises(ConnectionLost) as e:
        b.get(timeout=0)
    assert e.value.close_code == 1001


def test_async_buffer_wakes_a_waiting_reader():
    async def run():
        b = _buffer.AsyncBuffer(max_frames=4, max_stats=4)
        waiter = asyncio.ensure_future(b.get(("frames",), 2.0))
        await asyncio.sleep(0.05)
        b.put(frame(7, 220.0))
        got = await waiter
        with pytest.raises(asyncio.TimeoutError):
            await b.get(("frames",), 0.05)
        b.end(None)
        with pytest.raises(_buffer.BufferEnded):
            await b.get(("frames",), 0.05)
        return got
    assert asyncio.run(run()).index == 7


# ---- the band hold ------------------------------------------------------------------------------------

def feed(tracker, frames):
    for f in frames:
        hit = tracker.feed(f)
        if hit is not None:
            return hit
    return None


def test_hold_is_met_after_hold_s_of_audio_inside_with_inclusive_limits():
    band = lambda: (200.0, 220.0)  # noqa: E731
    t = HoldTracker(band, hold_s=0.1)
    # 0.1 s from the first frame inside: frames 10..30 (0.050 .. 0.150 s), 20 hops later.
    # A glide 200, 201, ... Hz: the limits themselves count as inside.
    frames = [frame(i, None) for i in range(10)] + [frame(i, 200.0 + (i - 10)) for i in range(10, 40)]
    hit = feed(t, frames)
    assert hit is not None
    assert hit.since_s == pytest.approx(0.050) and hit.time_s == pytest.approx(0.150)
    assert hit.frame.index == 30 and (hit.low_hz, hit.high_hz) == (200.0, 220.0)
    assert hit.median_f0_hz == 210.0  # the middle of 200..220 Hz


def test_hold_breaks_on_unvoiced_outside_and_missing_frames():
    band = lambda: (200.0, 220.0)  # noqa: E731
    for breaker in (None, 199.99, 220.01):
        t = HoldTracker(band, hold_s=0.1)
        frames = [frame(i, 210.0) for i in range(15)] + [frame(15, breaker)] + [frame(i, 210.0) for i in range(16, 60)]
        hit = feed(t, frames)
        assert hit is not None and hit.since_s == pytest.approx(16 * HOP_S), breaker
    # A gap in the indices (a dropped frame) breaks the stretch too; with a decimation of 4 a step of 4 does not.
    t = HoldTracker(band, hold_s=0.1)
    hit = feed(t, [frame(i, 210.0) for i in range(15)] + [frame(i, 210.0) for i in range(17, 60)])
    assert hit.since_s == pytest.approx(17 * HOP_S)
    t = HoldTracker(band, hold_s=0.1, every=4)
    hit = feed(t, [frame(i, 210.0) for i in range(0, 60, 4)])
    assert hit.since_s == 0.0 and hit.time_s == pytest.approx(0.1)
    # A reconnection breaks it.
    t = HoldTracker(band, hold_s=0.1)
    assert feed(t, [frame(i, 210.0) for i in range(15)]) is None
    t.gap()
    hit = feed(t, [frame(i, 210.0) for i in range(15, 60)])
    assert hit.since_s == pytest.approx(15 * HOP_S)
    assert t.longest_s == pytest.approx(0.1)


def test_hold_follows_a_band_that_changes_and_reports_the_longest_stretch():
    limits = [(200.0, 220.0)]
    t = HoldTracker(lambda: limits[0], hold_s=0.2)
    assert feed(t, [frame(i, 210.0) for i in range(30)]) is None  # 0.145 s held
    assert t.longest_s == pytest.approx(0.145)
    limits[0] = (300.0, 320.0)
    assert feed(t, [frame(i, 210.0) for i in range(30, 60)]) is None
    assert t.inside_frames == 30 and t.frames == 60


# ---- the clock estimate -------------------------------------------------------------------------------

def simulate_pings(offset, block_s, first_send, spacing, rtt, n, answer_at=0.5):
    """Round trips against a daemon whose audio count steps by block_s at local times offset + k*block_s and
    which reads it `answer_at` of the way through each round trip."""
    est = ClockEstimator()
    t = first_send
    for _ in range(n):
        w = t + answer_at * rtt
        audio = (int((w - offset) / block_s)) * block_s  # the count reached at the last step
        est.add(t, t + rtt, audio)
        t += rtt + spacing
    return est.estimate()


def test_clock_estimate_brackets_the_true_offset_from_the_steps():
    offset, block = 1000.0, 0.016  # local = audio + 1000 s; 16 ms blocks (the demo voice)
    for first in (1010.0, 1010.003, 1010.0071, 1010.0155):
        for answer_at in (0.1, 0.5, 0.9):
            est = simulate_pings(offset, block, first, spacing=0.003, rtt=0.0005, n=12, answer_at=answer_at)
            assert est.bounded
            assert abs(est.offset_s - offset) <= est.uncertainty_s + 1e-9, (first, answer_at, est)
            # pings 3.5 ms apart: the step is bracketed to within one spacing plus one round trip.
            assert est.uncertainty_s <= (0.003 + 2 * 0.0005) / 2 + 1e-9
            assert est.wall_time(est.audio_time(1234.5)) == pytest.approx(1234.5)


def test_clock_estimate_without_a_step_falls_back_to_the_best_midpoint():
    # Three pings inside one block: no step seen, so only an upper bound; midpoint of the least lagging.
    est = simulate_pings(1000.0, 0.016, 1010.001, spacing=0.001, rtt=0.001, n=3)
    assert not est.bounded and est.uncertainty_s == pytest.approx(0.0005)
    assert est.offset_s >= 1000.0 - 1e-9
    assert ClockEstimator().estimate() is None


def test_clock_estimator_forgets_old_round_trips():
    est = ClockEstimator(max_age_s=60.0)
    est.add(0.0, 0.001, 0.0)
    est.add(100.0, 100.001, 99.0)
    assert est.estimate().samples == 1


# ---- addresses, messages and exceptions ---------------------------------------------------------------

def test_addresses_and_the_token_kept_out_of_messages():
    assert resolve_url(7350) == ("ws://127.0.0.1:7350/ws", "ws://127.0.0.1:7350/ws", "http://127.0.0.1:7350")
    url, shown, origin = resolve_url("http://127.0.0.1:7400/?token=abc")
    assert url == "ws://127.0.0.1:7400/ws?token=abc" and "abc" not in shown and origin == "http://127.0.0.1:7400"
    url, shown, _ = resolve_url("ws://127.0.0.1:7400/ws?token=abc", token="def")
    assert url.endswith("token=def") and "def" not in shown
    with pytest.raises(ValueError):
        resolve_url("ftp://127.0.0.1:7400/")


def test_marker_and_messages_from_json():
    m = parse_stream_message({"type": "event", "seq": 9, "kind": "marker", "time_s": 2.5, "by": "lab",
                              "payload": {"id": "m1", "label": "onset", "data": {"trial": 1}, "sample": 40000,
                                          "wall": "2026-01-02T03:04:05.678Z"}}, 1.0)
    assert isinstance(m, Marker) and m.kind == "marker" and m.label == "onset" and m.data == {"trial": 1}
    assert m.sample == 40000 and m.request_id == "m1" and m.by == "lab"
    assert m.wall_s == pytest.approx(1767323045.678)
    f = parse_stream_message({"type": "frame", "seq": 3, "index": 4, "time_s": 0.02, "f0_hz": None}, 1.0)
    assert isinstance(f, Frame) and not f.voiced and f.voicing is None
    s = parse_stream_message({"type": "settled", "seq": 4, "index": 4, "time_s": 0.02, "f0_hz": 200.5}, 1.0)
    assert isinstance(s, Settled) and s.voiced
    assert parse_stream_message({"type": "pong", "seq": 5, "id": "p", "time_s": 1.0}, 1.0) is None


def test_exception_kinds():
    e = request_error("forbidden", "mark needs the lab or supervisor role", request="mark", request_id="m1")
    assert isinstance(e, ForbiddenError) and isinstance(e, RequestError) and e.code == "forbidden"
    assert "mark m1" in str(e)
    t = TokenRefused("refused", status=403)
    assert isinstance(t, ForbiddenError) and isinstance(t, ConnectionError) and t.code == "forbidden"
    assert isinstance(DaemonUnreachable("x"), ConnectionError)
    assert isinstance(BandTimeout("x"), TimeoutError) and isinstance(BandTimeout("x"), PitchwireError)
