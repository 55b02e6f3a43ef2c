"""The Python client against a running pitchwired on its demo voice (conftest.py starts it).

The demo voice (dsp/src/voice_synth.cpp, render_demo_session) is a coach's warm-up, looped: speech around
150-330 Hz with pauses, a sustained [a] at 220 Hz, a glide between 196 and 392 Hz and sung notes from 440 to
660 Hz. So it is voiced and unvoiced within a few seconds, held for 0.15 s inside 150-350 Hz within at most
6.5 s wherever the loop is (measured on the daemon's live frames over a whole loop), and never near
1000-1100 Hz.
"""

import asyncio
import datetime as dt
import socket
import time

import pytest

from conftest import DEMO_RATE_HZ
from pitchwire_client import (BandTimeout, BlockingClient, Client, ConnectionLost, DaemonUnreachable, ForbiddenError,
                              Frame, Marker, Reconnected, RequestError, Settled, TokenRefused)

HOP_S = 0.005  # the daemon's default hop_ms


def run(coro):
    return asyncio.run(asyncio.wait_for(coro, 60))


async def collect_frames(c, until, limit_s):
    """Live frames from `c` until until(frames) or limit_s seconds."""
    got = []
    end = time.monotonic() + limit_s
    async for m in c.frames():
        if isinstance(m, Frame):
            got.append(m)
            if until(got):
                break
        if time.monotonic() > end:
            break
    return got


def test_frames_increase_in_time_with_f0_none_when_unvoiced(daemon):
    async def body():
        async with Client(daemon.port) as c:
            assert c.hello.role == "observer" and c.hello.sample_rate_hz == DEMO_RATE_HZ
            assert c.subscription["every"] == 1 and c.subscription["fields"] == ["f0_hz", "voicing", "confidence", "level_dbfs"]
            voiced_and_not = lambda fs: len(fs) >= 200 and any(f.voiced for f in fs) and any(not f.voiced for f in fs)  # noqa: E731
            frames = await collect_frames(c, voiced_and_not, 15)
            await asyncio.sleep(0.2)  # a dropped_frames event would follow its gap
            return frames, c.dropped_frames, c.daemon_dropped_frames
    frames, dropped, daemon_dropped = run(body())
    assert dropped == 0
    assert any(f.voiced for f in frames) and any(not f.voiced for f in frames), "no voiced or no unvoiced frame"
    missing = 0
    for a, b in zip(frames, frames[1:]):
        assert b.index > a.index and b.time_s > a.time_s and b.seq > a.seq
        missing += b.index - a.index - 1
    # Every hop in order; a gap only where the daemon said it dropped frames for us (a busy machine).
    assert missing <= daemon_dropped
    for f in frames:
        assert f.time_s == pytest.approx(f.index * HOP_S, abs=1e-6)  # the hop's time on the audio clock
    for f in frames:
        # The frame is voiced when voicing is above 0.5 (docs/protocol.md): then F0 is a number in the search
        # range, else None.
        if f.voiced:
            assert isinstance(f.f0_hz, float) and 50.0 <= f.f0_hz <= 1400.0 and f.voicing > 0.5, f
        else:
            assert f.f0_hz is None and f.voicing <= 0.5 and f.confidence == 0.0, f
        assert isinstance(f.level_dbfs, float)


def test_settled_frames_follow_their_live_frames(daemon):
    async def body():
        async with Client(daemon.port, fields=["f0_hz"], settled=True, rate={"every": 2}) as c:
            assert c.subscription["settled"] is True and c.subscription["every"] == 2
            live, settled, newest_live = {}, [], {}
            end = time.monotonic() + 10
            async for m in c.frames():
                if isinstance(m, Frame):
                    live[m.index] = m
                elif isinstance(m, Settled):
                    settled.append(m)
                    newest_live[m.index] = max(live, default=-1)
                if len(settled) >= 100 or time.monotonic() > end:
                    break
            return live, settled, newest_live, c.hello.settle_ms
    live, settled, newest_live, settle_ms = run(body())
    assert len(settled) >= 100
    matched = [s for s in settled if s.index in live]
    assert len(matched) >= 90  # the first settled ones may belong to frames from before the subscription
    for s in matched:
        f = live[s.index]
        assert s.index % 2 == 0 and s.time_s == f.time_s
        # Sent settle_ms of audio (60 ms: 12 hops) after its live frame: by then the live frames had reached
        # at least 12 hops further (our stream has every other one).
        assert s.seq > f.seq and s.received >= f.received
        assert newest_live[s.index] >= s.index + 12 - 1, (s.index, newest_live[s.index])
        assert s.f0_hz is None or 50.0 <= s.f0_hz <= 1400.0
    assert settle_ms == 60.0
    assert [s.index for s in settled] == sorted(s.index for s in settled)


def test_marker_round_trip_on_both_clocks(daemon):
    async def body():
        async with Client(daemon.port, token=daemon.lab_token, subscribe=False) as lab, \
                Client(daemon.port, subscribe=False) as watcher:
            assert lab.role == "lab"
            before, audio_before = time.time(), await lab.ping()
            marker = await lab.mark("probe tone onset", {"trial": 7, "condition": "soft"})
            audio_after, after = await lab.ping(), time.time()
            seen = None
            async for ev in watcher.events():
                if isinstance(ev, Marker) and ev.request_id == marker.request_id:
                    seen = ev
                    break
            return marker, seen, before, after, audio_before, audio_after
    marker, seen, before, after, audio_before, audio_after = run(body())
    assert isinstance(marker, Marker) and marker.kind == "marker" and marker.by == "lab"
    assert marker.label == "probe tone onset" and marker.data == {"trial": 7, "condition": "soft"}
    # The audio clock when the daemon took the request, between the pings around it.
    assert audio_before <= marker.time_s <= audio_after
    # The audio clock as an input sample index: time_s x the 16 kHz of the demo voice, rounded (docs/protocol.md).
    assert marker.sample == round(marker.time_s * DEMO_RATE_HZ)
    # The daemon's wall clock then: UTC with milliseconds, between our send and the echo.
    assert marker.wall.endswith("Z") and marker.wall_datetime.tzinfo == dt.timezone.utc
    assert before - 0.001 <= marker.wall_s <= after + 0.001
    # Every connection gets the same marker event.
    assert seen is not None and seen.time_s == marker.time_s and seen.sample == marker.sample and seen.label == marker.label


def test_marker_from_an_observer_is_forbidden(daemon):
    async def body():
        async with Client(daemon.port, subscribe=False) as c:
            assert c.role == "observer"
            with pytest.raises(ForbiddenError) as e:
                await c.mark("not allowed")
            return e.value
    err = run(body())
    assert isinstance(err, RequestError) and err.code == "forbidden" and err.request == "mark"
    assert "observer" in err.message


def test_a_wrong_token_is_refused_clearly(daemon):
    wrong = "0" * 32 if daemon.lab_token != "0" * 32 else "1" * 32

    async def body():
        with pytest.raises(TokenRefused) as e:
            async with Client(daemon.port, token=wrong):
                pass
        return e.value
    err = run(body())
    assert isinstance(err, ForbiddenError) and isinstance(err, ConnectionError)
    assert err.code == "forbidden" and err.status == 403
    assert wrong not in str(err)  # the token stays out of messages


def test_supervisor_band_and_lab_refused(daemon):
    async def body():
        async with Client(daemon.port, token=daemon.supervisor_token, subscribe=False) as sup, \
                Client(daemon.port, token=daemon.lab_token, subscribe=False) as lab:
            band = await sup.set_band("pyclient_test", 150, "A3")
            seen_by_lab = lab.bands.get("pyclient_test")
            with pytest.raises(ForbiddenError):
                await lab.set_band("pyclient_test", 100, 200)
            with pytest.raises(RequestError) as bad:
                await sup.set_band("pyclient_test", 300, 200)
            await sup.clear_band("pyclient_test")
            await asyncio.sleep(0.1)
            return band, seen_by_lab, bad.value, "pyclient_test" in sup.bands
    band, seen_by_lab, bad, still_there = run(body())
    assert band.name == "pyclient_test" and band.low_hz == 150.0 and band.high_hz == pytest.approx(220.0, abs=0.01)
    assert seen_by_lab == band  # the lab connection followed the band_changed event
    assert bad.code == "bad_band"
    assert not still_there


def test_blocking_client_iterates_and_its_bounded_queue_drops_oldest_frames_only(daemon):
    with BlockingClient(daemon.port, token=daemon.lab_token, fields=["f0_hz"], queue_frames=20) as c:
        frames = c.frames(timeout=5)
        first = [next(frames) for _ in range(5)]
        assert all(isinstance(f, Frame) for f in first)
        assert all(b.index > a.index for a, b in zip(first, first[1:]))
        # (A busy machine may already have dropped a few here: frames can come in bursts.)
        dropped_before = c.dropped_frames
        # A slow consumer: a marker is added, then a second or more of frames (200 per second) arrive untaken.
        marker = c.mark("slow consumer")
        time.sleep(1.0)
        deadline = time.monotonic() + 3
        while c.dropped_frames - dropped_before < 100 and time.monotonic() < deadline:
            time.sleep(0.05)
        assert c.pending()["frames"] == 20
        assert c.dropped_frames - dropped_before >= 100
        kept = [next(frames) for _ in range(20)]
        # The queue kept the newest frames, in order.
        assert all(isinstance(f, Frame) for f in kept)
        assert [f.index for f in kept] == list(range(kept[0].index, kept[0].index + 20))
        assert kept[0].index - first[-1].index >= 100
        # Events are never dropped: the marker event is still in the events stream, and so is every stats
        # message of that second (one per 0.5 s of audio).
        events = []
        for ev in c.events(timeout=2):
            events.append(ev)
            if isinstance(ev, Marker):
                break
        assert events[-1].request_id == marker.request_id and events[-1].label == "slow consumer"
        assert c.pending()["stats"] >= 1 and c.dropped_stats == 0
        # The daemon itself dropped nothing for us: the client's thread read everything.
        assert c.daemon_dropped_frames == 0
        # Frames go on after the drops.
        more = next(frames)
        assert isinstance(more, Frame) and more.index > kept[-1].index


def test_clock_offset_is_stable_and_agrees_with_the_markers(daemon):
    """Two fresh estimates a second apart agree within 4 ms, and map a marker's audio time to within a block of
    its wall time. The daemon's audio clock is its analysis' sample count, which a busy machine can hold
    back by up to a few hundred milliseconds for a while (measured at a load average of 10 on two cores), so
    up to three attempts are made; on an idle machine the first one passes."""
    async def attempt(c):
        a = await c.sync_clock(fresh=True)
        await asyncio.sleep(0.5)
        b = await c.sync_clock(fresh=True)
        marker = await c.mark("clock check")
        frames = await collect_frames(c, lambda fs: len(fs) >= 50, 5)
        return a, b, marker, marker.wall_s - c.wall_time(marker.time_s), frames

    async def body():
        async with Client(daemon.port, token=daemon.lab_token, fields=["f0_hz"], rate=50) as c:
            first = c.clock_offset  # from the pings at connect
            tries = []
            for _ in range(3):
                a, b, marker, marker_diff, frames = await attempt(c)
                tries.append((a, b, marker_diff))
                # The audio count lags the input by up to one block of the demo (256 samples: 16 ms), and
                # `wall` has millisecond steps.
                if abs(a.offset_s - b.offset_s) <= 0.004 and -0.003 <= marker_diff <= 0.025:
                    break
            return first, tries, frames, c
    first, tries, frames, c = run(body())
    a, b, marker_diff = tries[-1]
    for est in (first, a, b):
        assert est.samples == 12 and est.uncertainty_s < 0.01, est
    assert a.bounded and b.bounded, (a, b)
    assert abs(a.offset_s - b.offset_s) <= 0.004, tries
    assert -0.003 <= marker_diff <= 0.025, tries
    # wall_time and audio_time are each other's inverse (to a microsecond: time.time near 1.8e9 s has a
    # resolution of 0.24 us in a double).
    for x in (0.0, 12.345678, frames[-1].time_s):
        assert c.audio_time(c.wall_time(x)) == pytest.approx(x, abs=1e-6)
    now = time.time()
    assert c.wall_time(c.audio_time(now)) == pytest.approx(now, abs=1e-6)
    # A frame reaches us after the audio at its time_s was analysed, and, for some frames at least, soon after.
    lates = [f.received - c.wall_time(f.time_s) for f in frames]
    assert min(lates) > -b.uncertainty_s and min(lates) < 0.1, lates


def test_wait_until_in_band_triggers_on_the_demo_voice(daemon):
    async def body():
        async with Client(daemon.port, fields=["f0_hz"]) as c, Client(daemon.port, fields=["f0_hz"]) as witness:
            # The witness records every live frame meanwhile, to check the trigger against.
            recorded = []

            async def record():
                async for m in witness.frames():
                    recorded.append(m)
            task = asyncio.ensure_future(record())
            await asyncio.sleep(1.0)  # a second of frames waits in c's queue: they must not count
            called_audio = c.audio_time(time.time())
            called = time.monotonic()
            hold = await c.wait_until_in_band(150.0, 350.0, hold_s=0.15, timeout_s=12.0)
            took = time.monotonic() - called
            await asyncio.sleep(0.1)
            task.cancel()
            return hold, called_audio, took, recorded, c.wall_time(hold.time_s)
    hold, called_audio, took, recorded, hold_wall = run(body())
    assert took < 12.0
    assert hold.time_s - hold.since_s >= 0.15 - 1e-9 and hold.time_s - hold.since_s < 0.15 + HOP_S
    assert (hold.low_hz, hold.high_hz) == (150.0, 350.0)
    assert hold.frame.time_s == hold.time_s and 150.0 <= hold.frame.f0_hz <= 350.0
    # Only voice after the call counts: the queued second of frames was discarded first (those in flight may
    # be a few tens of milliseconds old, more on a busy machine).
    assert hold.since_s >= called_audio - 0.5
    # Against the witness's frames: every frame of the stretch voiced and inside, the one before it not.
    by_index = {f.index: f for f in recorded if isinstance(f, Frame)}
    stretch = [by_index[i] for i in range(round(hold.since_s / HOP_S), hold.frame.index + 1)]
    assert all(f.voiced and 150.0 <= f.f0_hz <= 350.0 for f in stretch)
    before = by_index[round(hold.since_s / HOP_S) - 1]
    assert not (before.voiced and 150.0 <= before.f0_hz <= 350.0) or before.time_s < called_audio
    # The hold was met just now: its audio time maps to a wall time within a moment of the return.
    assert abs(time.time() - hold_wall) < 5.0


def test_wait_until_in_band_times_out_where_the_voice_never_is(daemon):
    async def body():
        async with Client(daemon.port, fields=["f0_hz"], rate=100) as c:
            called = time.monotonic()
            with pytest.raises(BandTimeout) as e:
                await c.wait_until_in_band(1000.0, 1100.0, hold_s=0.05, timeout_s=2.0)
            return e.value, time.monotonic() - called
    err, took = run(body())
    assert isinstance(err, TimeoutError) and err.code == "band_timeout"
    assert 2.0 <= took < 3.0
    assert err.longest_hold_s == 0.0 and err.inside_frames == 0
    assert err.frames >= 100  # 100 frames per second for 2 s, less what a busy machine held back
    assert "1000-1100 Hz" in str(err)


def test_wait_until_in_named_band_with_the_blocking_client(daemon):
    with BlockingClient(daemon.port, token=daemon.supervisor_token, fields=["f0_hz"]) as c:
        c.set_band("pyclient_hold", 150, 350)
        try:
            hold = c.wait_until_in_band(band="pyclient_hold", hold_s=0.15, timeout_s=12.0)
            assert (hold.low_hz, hold.high_hz) == (150.0, 350.0) and hold.time_s - hold.since_s >= 0.15 - 1e-9
            with pytest.raises(ValueError):
                c.wait_until_in_band(band="no_such_band", hold_s=0.1, timeout_s=1.0)
            with pytest.raises(BandTimeout):
                c.wait_until_in_band(1000, 1100, hold_s=0.05, timeout_s=0.5)
        finally:
            c.clear_band("pyclient_hold")


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_an_absent_daemon_is_a_clear_connection_error():
    port = free_port()  # nothing listens there once the socket is closed

    async def body():
        with pytest.raises(DaemonUnreachable) as e:
            async with Client(port):
                pass
        return e.value
    err = run(body())
    assert isinstance(err, ConnectionError) and err.code == "unreachable"
    assert f"127.0.0.1:{port}" in str(err) and "pitchwired" in str(err)
    with pytest.raises(DaemonUnreachable):
        BlockingClient(port)


def test_reconnects_to_a_restarted_daemon_and_says_so(new_daemon):
    d = new_daemon().start()
    port = d.port

    async def body():
        async with Client(port, fields=["f0_hz"], reconnect=True, reconnect_initial_s=0.05, reconnect_max_s=0.5,
                          reconnect_give_up_s=20) as c, Client(port, fields=["f0_hz"]) as plain:
            before = await collect_frames(c, lambda fs: len(fs) >= 20, 5)
            await collect_frames(plain, lambda fs: len(fs) >= 5, 5)
            stopped = time.monotonic()
            loop = asyncio.get_running_loop()
            assert await loop.run_in_executor(None, d.stop) == 0
            # A client without reconnect: its stream ends with ConnectionLost, 1001 (going away).
            with pytest.raises(ConnectionLost) as lost:
                async for _ in plain.frames():
                    pass
            await asyncio.sleep(0.3)
            restarted_at = time.time()
            await loop.run_in_executor(None, lambda: d.start(port=port))  # the same port, given explicitly
            notice, after = None, []
            end = time.monotonic() + 15
            async for m in c.frames():
                if isinstance(m, Reconnected):
                    notice = m
                elif notice is None:
                    before.append(m)  # what the first connection sent before it was lost
                else:
                    after.append(m)
                    if len(after) >= 20:
                        break
                if time.monotonic() > end:
                    break
            # The notice is in the events stream too, and requests work again.
            ev = await asyncio.wait_for(c.events().__anext__(), 5)
            while not isinstance(ev, Reconnected):
                ev = await asyncio.wait_for(c.events().__anext__(), 5)
            audio_now = await c.ping()
            return (before, lost.value, notice, after, ev, audio_now, c.reconnects, time.monotonic() - stopped,
                    restarted_at)
    before, lost, notice, after, ev, audio_now, reconnects, took, restarted_at = run(body())
    assert lost.close_code == 1001 and "stopped" in str(lost)
    assert notice is not None, "no Reconnected notice"
    assert ev is notice and reconnects == 1
    assert notice.new_audio_clock  # the daemon restarted: its audio clock began again
    assert notice.back_at > notice.lost_at and notice.gap_s < 10 and notice.attempts >= 1
    assert notice.hello.role == "observer"
    # Before the notice only the first connection's frames, in order; after it the new connection's:
    # re-subscribed, on the new audio clock, in order.
    assert [f.index for f in before] == list(range(before[0].index, before[0].index + len(before)))
    assert all(isinstance(f, Frame) for f in after)
    assert len(after) == 20
    # On the new daemon's audio clock, which began after the restart: no frame's audio time can exceed the
    # time since then (the old clock was at before[-1].time_s plus the whole gap).
    assert all(f.time_s <= f.received - restarted_at for f in after), (after[0], restarted_at)
    assert [f.index for f in after] == list(range(after[0].index, after[0].index + 20))
    assert audio_now >= after[-1].time_s
    assert took < 20


def test_the_example_routine_runs_against_the_demo_voice(daemon, tmp_path):
    """clients/python/examples/steady_tone_probe.py, one trial, with a band the demo voice reaches soon."""
    import subprocess
    import sys
    from conftest import REPO
    out = tmp_path / "trials.csv"
    proc = subprocess.run([sys.executable, str(REPO / "clients" / "python" / "examples" / "steady_tone_probe.py"),
                           "--port", str(daemon.port), "--token", daemon.lab_token, "--trials", "2",
                           "--low", "150", "--high", "350", "--hold", "0.15", "--timeout", "12", "--response", "0.3",
                           "--pause", "0", "--csv", str(out)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "as lab" in proc.stdout and daemon.lab_token not in proc.stdout
    rows = out.read_text().splitlines()
    assert len(rows) == 3 and rows[0].startswith("trial,result,")
    for row in rows[1:]:
        cells = dict(zip(rows[0].split(","), row.split(",")))
        assert cells["result"] == "ok"
        assert float(cells["trigger_s"]) - float(cells["hold_from_s"]) >= 0.15 - 1e-6
        assert int(cells["marker_sample"]) == round(float(cells["marker_s"]) * DEMO_RATE_HZ)
        assert float(cells["marker_s"]) >= float(cells["trigger_s"])
