#!/usr/bin/python3
"""steady_tone_probe.py: "hold the tone, then probe", an example of a pitch-triggered routine with
pitchwire_client.

Each trial: the speaker sustains a comfortable tone. Once the voice has stayed voiced inside the target band
for --hold seconds (the trigger), the program presents its probe (here a line on the terminal and the
terminal's bell; a lab puts its own sound or picture there) and at that moment sends a marker "probe onset"
with the trial's data, so that the session record shows the onset on the audio clock. It then follows the
voice for --response seconds and reports how far its median F0 moved from the pitch it held before the
probe, in cents, and pauses --pause seconds before the next trial. A trial whose trigger does not come within
--timeout seconds is reported as missed.

  pitchwired --input demo &        # prints its address; the lab token is in its token folder
  PYTHONPATH=clients/python /usr/bin/python3 clients/python/examples/steady_tone_probe.py --trials 3

Against the demo voice the defaults (band 180-260 Hz, hold 0.3 s) trigger within a few seconds; the demo
does not answer the probe, of course, so its "shift" is just how its speech went on. Options: --port, --token
or --token-dir (default: the daemon's default token folder), --low/--high in Hz, --csv FILE for one row per
trial. It uses BlockingClient: a stimulus program's loop needs no asyncio.
"""

import argparse
import csv
import math
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

from pitchwire_client import (BandTimeout, BlockingClient, Frame, PitchwireError,  # noqa: E402
                              Reconnected, read_token)


def present_probe(trial):
    """The stimulus. Replace with the lab's own (play a sound, show a picture); keep it quick."""
    print(f"  trial {trial}: PROBE \a", flush=True)


def follow_voice(client, seconds):
    """Live F0 of the next `seconds` of audio (None for unvoiced frames), or None after a reconnection."""
    values, start = [], None
    for msg in client.frames(timeout=2.0):
        if isinstance(msg, Reconnected):
            return None
        if not isinstance(msg, Frame):
            continue
        start = msg.time_s if start is None else start
        if msg.time_s - start >= seconds:
            return values
        values.append(msg.f0_hz)
    return values


def run_trial(client, trial, args):
    try:
        hold = client.wait_until_in_band(args.low, args.high, hold_s=args.hold, timeout_s=args.timeout)
    except BandTimeout as e:
        print(f"  trial {trial}: missed ({e.message})")
        return {"trial": trial, "result": "missed"}
    present_probe(trial)
    onset_local = time.time()
    marker = client.mark("probe onset", {"trial": trial, "band_hz": [args.low, args.high], "hold_s": args.hold,
                                          "held_f0_hz": round(hold.median_f0_hz, 2)})
    voice = follow_voice(client, args.response)
    row = {"trial": trial, "result": "ok", "hold_from_s": round(hold.since_s, 3), "trigger_s": round(hold.time_s, 3),
           "held_f0_hz": round(hold.median_f0_hz, 2), "marker_s": marker.time_s, "marker_sample": marker.sample,
           "marker_wall": marker.wall,
           # From the frame that completed the hold to the onset's marker, on the audio clock: the
           # routine's own reaction time (analysis, network, this loop, the probe, the mark request).
           "trigger_to_marker_ms": round(1000 * (marker.time_s - hold.time_s), 1),
           # The same on the local clock, from when the daemon's audio clock reached the trigger frame.
           "onset_after_trigger_ms": round(1000 * (onset_local - client.wall_time(hold.time_s)), 1)}
    if voice is None:
        row["result"] = "reconnected"
    else:
        voiced = [f for f in voice if f is not None]
        row["response_voiced"] = round(len(voiced) / len(voice), 2) if voice else 0.0
        if voiced:
            median = statistics.median(voiced)
            row["response_f0_hz"] = round(median, 2)
            row["shift_cents"] = round(1200 * math.log2(median / hold.median_f0_hz), 1)  # 1200 cents per octave
    print(f"  trial {trial}: held {row['held_f0_hz']} Hz from {row['hold_from_s']} s, triggered at "
          f"{row['trigger_s']} s; marker at {marker.time_s} s (sample {marker.sample}, {marker.wall}), "
          f"{row['trigger_to_marker_ms']} ms after the trigger; response "
          f"{row.get('response_f0_hz', '-')} Hz, shift {row.get('shift_cents', '-')} cents")
    return row


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--port", default="7350", help="the daemon's port or address (default 7350)")
    ap.add_argument("--token", help="the lab token (default: read from --token-dir)")
    ap.add_argument("--token-dir", help="the daemon's token folder (default: its default, ~/.local/state/pitchwire)")
    ap.add_argument("--trials", type=int, default=5)
    ap.add_argument("--low", type=float, default=180.0, help="band's low limit, Hz")
    ap.add_argument("--high", type=float, default=260.0, help="band's high limit, Hz")
    ap.add_argument("--hold", type=float, default=0.3, help="seconds the voice must stay inside before the probe")
    ap.add_argument("--timeout", type=float, default=20.0, help="seconds to wait for a trigger before a trial is missed")
    ap.add_argument("--response", type=float, default=0.8, help="seconds of voice followed after the probe")
    ap.add_argument("--pause", type=float, default=1.0, help="seconds between trials")
    ap.add_argument("--csv", help="write one row per trial to this file")
    args = ap.parse_args()

    try:
        token = args.token or read_token("lab", args.token_dir)
    except FileNotFoundError as e:
        sys.exit(f"steady_tone_probe: {e}")
    rows = []
    try:
        with BlockingClient(args.port, token=token, fields=["f0_hz"], reconnect=True) as client:
            off = client.clock_offset
            print(f"connected to {client.url} as {client.role}: {client.hello.sample_rate_hz:g} Hz input, "
                  f"audio clock offset {off.offset_s:.4f} s +- {off.uncertainty_s * 1000:.1f} ms")
            print(f"band {args.low:g}-{args.high:g} Hz, hold {args.hold:g} s, {args.trials} trials")
            for trial in range(1, args.trials + 1):
                rows.append(run_trial(client, trial, args))
                time.sleep(args.pause)
            print(f"frames dropped by this program's queue: {client.dropped_frames}")
    except PitchwireError as e:
        sys.exit(f"steady_tone_probe: {e}")
    except KeyboardInterrupt:
        pass
    if args.csv and rows:
        names = list(dict.fromkeys(k for r in rows for k in r))
        with open(args.csv, "w", newline="", encoding="utf-8") as f:
            w = csv.DictWriter(f, fieldnames=names)
            w.writeheader()
            w.writerows(rows)
    return 0 if rows and all(r["result"] == "ok" for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
