#!/usr/bin/python3
"""Whole-program speed of `pitchwire analyze` against SPTK RAPT (and the other references, for information).

  speed.py --pitchwire PATH --corpus DIR [--repeats 3] [--hop-ms 5] [--check] [--out FILE.md]

Every tracker processes every corpus file, one process per file, one process at a time (no parallel load
from this script). The whole pass is repeated --repeats times, the trackers taking turns within each
repetition, and each tracker's best (smallest) total is kept. SPTK reads raw float32 samples: the WAV files
are converted before any timing and that conversion time is reported separately, not added to SPTK's time.
The bar's RAPT runs on the same files at their own sample rate; RAPT on the 16 kHz copy that accuracy.py
uses is listed too, for information (its resampling is part of the untimed conversion).

Figures: audio seconds processed; wall seconds (best repetition); real-time factor RTF = processing time /
audio time; throughput relative to RAPT = RAPT's wall time / the tracker's wall time.
--check exits 1 unless pitchwire's throughput is at least 10 times RAPT's.
"""
from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
import wave

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import reftrackers as rt  # noqa: E402

BAR_THROUGHPUT_VS_RAPT = 10.0
RAPT_BAR = "RAPT (SPTK), same files"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pitchwire", required=True)
    ap.add_argument("--corpus", required=True)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--hop-ms", type=float, default=rt.HOP_MS)
    ap.add_argument("--check", action="store_true", help=f"exit 1 unless pitchwire >= {BAR_THROUGHPUT_VS_RAPT:g}x RAPT")
    ap.add_argument("--out", help="also write the report to this markdown file")
    a = ap.parse_args(argv)

    manifest = rt.read_manifest(a.corpus)
    wavs = [os.path.join(a.corpus, m["name"] + ".wav") for m in manifest]
    audio_s = 0.0
    rates = set()
    for w in wavs:
        with wave.open(w, "rb") as f:
            audio_s += f.getnframes() / f.getframerate()
            rates.add(f.getframerate())

    # The rows: (label, tracker, settings). RAPT_BAR is `sptk pitch -a 0` on the same files at their own rate:
    # the bar compares against it. RAPT on the 16 kHz copy used by accuracy.py is shown for information.
    rapt_s = rt.REF_SETTINGS[rt.RAPT]
    rapt_native = rt.RefSettings(resample_16k=False, f0_min=rapt_s.f0_min, f0_max=rapt_s.f0_max,
                                 voicing=rapt_s.voicing)
    rows: list[tuple[str, str, rt.RefSettings | None]] = [("pitchwire analyze", "pitchwire", None),
                                                          (RAPT_BAR, rt.RAPT, rapt_native)]
    if rapt_s.resample_16k:
        rows.append((f"{rt.RAPT}, as in accuracy.py", rt.RAPT, rapt_s))
    rows += [(n, n, rt.REF_SETTINGS[n]) for n in (rt.SWIPE, rt.YIN, rt.YINFFT)]

    tmp = tempfile.mkdtemp(prefix="pw-speed-")
    try:
        # Input conversion for SPTK (raw float32; a 16 kHz copy where the settings say so), before any timing.
        sptk_inputs: dict[bool, list[tuple[str, int]]] = {}
        prep_s: dict[bool, float] = {}
        for _, tracker, st in rows:
            if tracker in (rt.RAPT, rt.SWIPE) and st.resample_16k not in sptk_inputs:
                d = os.path.join(tmp, "16k" if st.resample_16k else "native")
                os.makedirs(d)
                conv, secs = [], 0.0
                for w in wavs:
                    raw, rate, dt = rt.sptk_input(w, d, st.resample_16k)
                    conv.append((raw, rate))
                    secs += dt
                sptk_inputs[st.resample_16k], prep_s[st.resample_16k] = conv, secs

        def runner(tracker: str, st: rt.RefSettings | None):
            if tracker == "pitchwire":
                return lambda: [rt.run_pitchwire(a.pitchwire, w, a.hop_ms) for w in wavs]
            if tracker in (rt.RAPT, rt.SWIPE):
                algo = 0 if tracker == rt.RAPT else 1
                return lambda: [rt.run_sptk(raw, rate, algo, a.hop_ms, st.f0_min, st.f0_max, voicing=st.voicing)
                                for raw, rate in sptk_inputs[st.resample_16k]]
            method = "yin" if tracker == rt.YIN else "yinfft"

            def go() -> None:
                for w in wavs:
                    with wave.open(w, "rb") as f:
                        rate = f.getframerate()
                    rt.run_aubio(w, rate, method, a.hop_ms, st.buf_ms, st.tolerance)
            return go

        best: dict[str, float] = {}
        all_times: dict[str, list[float]] = {}
        for rep in range(max(1, a.repeats)):
            for label, tracker, st in rows:
                fn = runner(tracker, st)
                t0 = time.perf_counter()
                fn()
                dt = time.perf_counter() - t0
                all_times.setdefault(label, []).append(dt)
                best[label] = min(best.get(label, dt), dt)
                print(f"repetition {rep + 1}: {label} {dt:.3f} s", file=sys.stderr)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)

    rapt = best[RAPT_BAR]
    out: list[str] = []
    w = out.append
    w("# pitchwire speed against reference trackers\n")
    w(f"Corpus `{a.corpus}`: {len(wavs)} files, {audio_s:.1f} s of audio at "
      f"{', '.join(str(r) for r in sorted(rates))} Hz; hop {a.hop_ms:g} ms; one process per file, one at a time; "
      f"best of {a.repeats} repetitions.\n")
    w("| Tracker | Settings | Audio (s) | Wall, best (s) | All repetitions (s) | RTF | Throughput vs RAPT "
      "| Input conversion (s, not timed) |")
    w("|---|---|---:|---:|---|---:|---:|---:|")
    for label, tracker, st in rows:
        settings = (f"`pitchwire analyze FILE --hop-ms {a.hop_ms:g}`" if st is None else st.describe(tracker))
        prep = f"{prep_s[st.resample_16k]:.3f}" if tracker in (rt.RAPT, rt.SWIPE) else "-"
        w(f"| {label} | {settings} | {audio_s:.1f} | {best[label]:.3f} | "
          f"{', '.join(f'{t:.3f}' for t in all_times[label])} | {best[label] / audio_s:.4f} "
          f"| {rapt / best[label]:.2f}x | {prep} |")
    w("")
    w(f"RTF = processing (wall) time / audio time; throughput vs RAPT = the wall time of \"{RAPT_BAR}\" (the "
      "same files at their own sample rate) / the tracker's. Times include process start-up and file reading "
      "for every tracker. SPTK's input is the converted raw float file, prepared beforehand; where it is a 16 kHz "
      "copy, the resampling is part of that untimed conversion.")
    ratio = rapt / best["pitchwire analyze"]
    ok = ratio >= BAR_THROUGHPUT_VS_RAPT
    if a.check:
        w(f"\nCheck: {'PASS' if ok else 'FAIL'}: pitchwire throughput {ratio:.2f}x that of {RAPT_BAR}, bar >= "
          f"{BAR_THROUGHPUT_VS_RAPT:g}x")
    report = "\n".join(out) + "\n"
    sys.stdout.write(report)
    if a.out:
        with open(a.out, "w") as f:
            f.write(report)
    if a.check and not ok:
        print(f"speed check FAILED: pitchwire throughput {ratio:.2f}x RAPT's < {BAR_THROUGHPUT_VS_RAPT:g}x",
              file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
