"""Typed messages of protocol v1 (docs/protocol.md), built from the daemon's JSON.

Every class keeps the JSON it came from in `raw`, so that members added to the protocol within version 1
stay reachable before this package names them. `received` is the local clock (the client's `clock`,
time.time by default) when the client read the message; `seq` is the daemon's per-connection counter.

The stream classes are Frame and Settled (droppable: the newest wins when a queue is full), Stats, Event
(with Marker for `marker` events) and the client's own notice Reconnected.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any, Dict, List, Optional, Union

__all__ = ["Band", "Hello", "Frame", "Settled", "Stats", "BandStats", "Event", "Marker", "Reconnected",
           "Message", "parse_stream_message"]

Json = Dict[str, Any]


@dataclass(frozen=True)
class Band:
    """A target band: `name`, `low_hz`, `high_hz` (limits inclusive, as the daemon counts time inside)."""

    name: str
    low_hz: float
    high_hz: float

    def contains(self, f0_hz: Optional[float]) -> bool:
        return f0_hz is not None and self.low_hz <= f0_hz <= self.high_hz

    @staticmethod
    def from_json(j: Json) -> "Band":
        return Band(str(j["name"]), float(j["low_hz"]), float(j["high_hz"]))


@dataclass(frozen=True)
class Hello:
    """The daemon's greeting: what it analyses and what this connection may do."""

    protocol: int
    server_version: str
    sample_rate_hz: float  # of the input: marker `sample` = round(time_s * sample_rate_hz)
    channel: Union[int, str]  # 1-based input channel, or "mixdown"
    hop_ms: float
    settle_ms: float
    reference_hz: float
    f0_min_hz: float
    f0_max_hz: float
    role: str  # "observer", "lab" or "supervisor"
    bands: List[Band]
    exercise: Optional[Json]
    spl_offset_db: Optional[float]
    fields: List[str]
    limits: Json
    raw: Json = field(repr=False)

    @staticmethod
    def from_json(j: Json) -> "Hello":
        audio = j.get("audio", {})
        rng = j.get("f0_range_hz", {})
        return Hello(
            protocol=int(j.get("protocol", 1)), server_version=str(j.get("server_version", "")),
            sample_rate_hz=float(audio.get("sample_rate_hz", 0.0)), channel=audio.get("channel", "mixdown"),
            hop_ms=float(j.get("hop_ms", 5.0)), settle_ms=float(j.get("settle_ms", 0.0)),
            reference_hz=float(j.get("reference_hz", 100.0)),
            f0_min_hz=float(rng.get("min", 0.0)), f0_max_hz=float(rng.get("max", 0.0)), role=str(j.get("role", "observer")),
            bands=[Band.from_json(b) for b in j.get("bands", [])], exercise=j.get("exercise"),
            spl_offset_db=j.get("spl_offset_db"), fields=list(j.get("fields", [])), limits=dict(j.get("limits", {})), raw=j)


@dataclass(frozen=True)
class Frame:
    """The live value of one hop (`frame`).

    `index` is the hop number from the start of the stream, `time_s` the centre of its analysis window on
    the audio clock. `f0_hz` is None when the hop is unvoiced, and also when the subscription did not ask for
    it (likewise `voicing`, `confidence`, `level_dbfs`).
    """

    index: int
    time_s: float
    f0_hz: Optional[float]
    voicing: Optional[float]
    confidence: Optional[float]
    level_dbfs: Optional[float]
    seq: int
    received: float
    raw: Json = field(repr=False, compare=False)

    @property
    def voiced(self) -> bool:
        return self.f0_hz is not None

    @staticmethod
    def from_json(j: Json, received: float) -> "Frame":
        return Frame(int(j["index"]), float(j["time_s"]), _opt(j.get("f0_hz")), _opt(j.get("voicing")),
                     _opt(j.get("confidence")), _opt(j.get("level_dbfs")), int(j.get("seq", 0)), received, j)


@dataclass(frozen=True)
class Settled:
    """The settled F0 of the earlier frame with the same `index` (`settled`): it replaces the live value.
    Sent `settle_ms` after the live frame to subscriptions with settled=True. `f0_hz` is None when unvoiced."""

    index: int
    time_s: float
    f0_hz: Optional[float]
    seq: int
    received: float
    raw: Json = field(repr=False, compare=False)

    @property
    def voiced(self) -> bool:
        return self.f0_hz is not None

    @staticmethod
    def from_json(j: Json, received: float) -> "Settled":
        return Settled(int(j["index"]), float(j["time_s"]), _opt(j.get("f0_hz")), int(j.get("seq", 0)), received, j)


@dataclass(frozen=True)
class BandStats:
    """One target band in `stats`: the share of the window's voiced frames inside it, and its held state."""

    name: str
    inside_fraction: Optional[float]
    state: str  # "below", "inside", "above" or "unvoiced"


@dataclass(frozen=True)
class Stats:
    """Statistics over the last `window_s` seconds ending at `time_s` (`stats`; definitions in
    docs/measures.md). F0 figures are None when the window held no voiced frame. Every other member the daemon
    sends is in `raw` (the F0 points in semitones, the levels in dB SPL, ...)."""

    time_s: float
    window_s: float
    voiced_fraction: Optional[float]
    f0_p5_hz: Optional[float]
    f0_p50_hz: Optional[float]
    f0_p95_hz: Optional[float]
    f0_min_hz: Optional[float]
    f0_max_hz: Optional[float]
    f0_sd_st: Optional[float]
    f0_range_st: Optional[float]
    reference_hz: Optional[float]
    level_mean_dbfs: Optional[float]
    level_max_dbfs: Optional[float]
    session_voiced_s: Optional[float]
    session_cycle_dose: Optional[float]
    bands: List[BandStats]
    seq: int
    received: float
    raw: Json = field(repr=False, compare=False)

    @staticmethod
    def from_json(j: Json, received: float) -> "Stats":
        g = lambda k: _opt(j.get(k))  # noqa: E731
        return Stats(
            float(j["time_s"]), float(j.get("window_s", 0.0)), g("voiced_fraction"), g("f0_p5_hz"), g("f0_p50_hz"),
            g("f0_p95_hz"), g("f0_min_hz"), g("f0_max_hz"), g("f0_sd_st"), g("f0_range_st"), g("reference_hz"),
            g("level_mean_dbfs"), g("level_max_dbfs"), g("session_voiced_s"), g("session_cycle_dose"),
            [BandStats(str(b.get("name")), _opt(b.get("inside_fraction")), str(b.get("state"))) for b in j.get("bands", [])],
            int(j.get("seq", 0)), received, j)


@dataclass(frozen=True)
class Event:
    """Something that happened at `time_s` on the audio clock (`event`). `kind` says what (`band_crossing`,
    `band_changed`, `exercise_started`, `exercise_ended`, `reference_changed`, `dose_limit`,
    `recording_problem`, `dropped_frames`, `device_lost`, ...; docs/protocol.md lists each payload); `by` is
    the role whose request caused it, or None for the daemon's own events."""

    kind: str
    time_s: float
    payload: Json
    by: Optional[str]
    seq: int
    received: float
    raw: Json = field(repr=False, compare=False)

    @staticmethod
    def from_json(j: Json, received: float) -> "Event":
        kind = str(j["kind"])
        payload = dict(j.get("payload") or {})
        if kind == "marker":
            return Marker.from_json(j, received)
        return Event(kind, float(j["time_s"]), payload, j.get("by"), int(j.get("seq", 0)), received, j)


@dataclass(frozen=True)
class Marker(Event):
    """A `marker` event: a mark request as the daemon recorded it, on both clocks.

    `time_s` is the audio clock when the daemon received it; `sample` the same instant as an input sample
    index (round(time_s * sample rate)); `wall` the daemon's UTC wall clock then, as sent (ISO 8601 with
    milliseconds) and as `wall_datetime`. `request_id` is the id of the mark request, `label` and `data` as
    sent.
    """

    label: str = ""
    data: Optional[Json] = None
    sample: Optional[int] = None
    wall: Optional[str] = None
    request_id: Optional[str] = None

    @property
    def wall_datetime(self) -> Optional[_dt.datetime]:
        """`wall` as an aware datetime in UTC, or None."""
        if not self.wall:
            return None
        return _dt.datetime.fromisoformat(self.wall.replace("Z", "+00:00"))

    @property
    def wall_s(self) -> Optional[float]:
        """`wall` as seconds since the Unix epoch (time.time's clock), or None."""
        d = self.wall_datetime
        return d.timestamp() if d else None

    @staticmethod
    def from_json(j: Json, received: float) -> "Marker":
        p = dict(j.get("payload") or {})
        sample = p.get("sample")
        return Marker("marker", float(j["time_s"]), p, j.get("by"), int(j.get("seq", 0)), received, j,
                      label=str(p.get("label", "")), data=p.get("data"),
                      sample=int(sample) if sample is not None else None, wall=p.get("wall"),
                      request_id=p.get("id"))


@dataclass(frozen=True)
class Reconnected:
    """The client's own notice: the connection was lost and is back, re-subscribed. Frames between
    `lost_at` and `back_at` (local clock) are missing. `attempts` is how many connections were tried;
    `new_audio_clock` is True when the daemon's audio clock started again (the daemon itself restarted:
    times before and after the gap are not comparable); `hello` is the new greeting."""

    lost_at: float
    back_at: float
    attempts: int
    new_audio_clock: bool
    hello: Hello
    close_code: Optional[int] = None

    @property
    def gap_s(self) -> float:
        return self.back_at - self.lost_at


Message = Union[Frame, Settled, Stats, Event, Reconnected]


def parse_stream_message(j: Json, received: float) -> Optional[Message]:
    """A Frame, Settled, Stats or Event from the daemon's JSON, or None for other types."""
    t = j.get("type")
    if t == "frame":
        return Frame.from_json(j, received)
    if t == "settled":
        return Settled.from_json(j, received)
    if t == "stats":
        return Stats.from_json(j, received)
    if t == "event":
        return Event.from_json(j, received)
    return None


def _opt(v: Any) -> Optional[float]:
    return None if v is None else float(v)
