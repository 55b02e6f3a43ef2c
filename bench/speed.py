#!/usr/bin/python3
"""Whole-program speed of `pitchwire analyze` against SPTK RAPT (and the other references, for information).

  speed.py --pitchwire PATH --corpus DIR [--repeats 3] [--hop-ms 5] [--check] [--out FILE.md]

Every tracker processes every corpus file, one process per file, one process at a time (no parallel load
from this script). The whole pass is repeated --repeats times, the trackers taking turns within each
repetition, and each tracker's best (smallest) total is kept. SPTK reads raw float32 samples: the WAV files
are converted before any timing (with the same settings as accuracy.py, e.g. a 16 kHz copy) and that
conversion time is reported separately, not added to SPTK's time.

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

    tmp = tempfile.mkdtemp(prefix="pw-speed-")
    try:
        # Input conversion for SPTK, before any timing. RAPT and SWIPE' may use different settings.
        sptk_inputs: dict[str, list[tuple[str, int]]] = {}
        prep_s: dict[str, float] = {}
        for name in (rt.RAPT, rt.SWIPE):
            s = rt.REF_SETTINGS[name]
            d = os.path.join(tmp, "16k" if s.resample_16k else "native")
            if not os.path.isdir(d):
                os.makedirs(d)
                conv, secs = [], 0.0
                for w in wavs:
                    raw, rate, dt = rt.sptk_input(w, d, s.resample_16k)
                    conv.append((raw, rate))
                    secs += dt
                sptk_inputs[d], prep_s[d] = conv, secs
            sptk_inputs[name] = sptk_inputs[d]
            prep_s[name] = prep_s[d]

        def run_pitchwire() -> None:
            for w in wavs:
                rt.run_pitchwire(a.pitchwire, w, a.hop_ms)

        def run_sptk(name: str, algo: int):
            s = rt.REF_SETTINGS[name]
            return lambda: [rt.run_sptk(raw, rate, algo, a.hop_ms, s.f0_min, s.f0_max, voicing=s.voicing)
                            for raw, rate in sptk_inputs[name]]

        def run_aubio(name: str, method: str):
            s = rt.REF_SETTINGS[name]

            def go() -> None:
                for w in wavs:
                    with wave.open(w, "rb") as f:
                        rate = f.getframerate()
                    rt.run_aubio(w, rate, method, a.hop_ms, s.buf_ms, s.tolerance)
            return go

        runners = [("pitchwire analyze", run_pitchwire), (rt.RAPT, run_sptk(rt.RAPT, 0)),
                   (rt.SWIPE, run_sptk(rt.SWIPE, 1)), (rt.YIN, run_aubio(rt.YIN, "yin")),
                   (rt.YINFFT, run_aubio(rt.YINFFT, "yinfft"))]
        best: dict[str, float] = {}
        all_times: dict[str, list[float]] = {}
        for rep in range(max(1, a.repeats)):
            for name, fn in runners:
                t0 = time.perf_counter()
                fn()
                dt = time.perf_counter() - t0
                all_times.setdefault(name, []).append(dt)
                best[name] = min(best.get(name, dt), dt)
                print(f"repetition {rep + 1}: {name} {dt:.3f} s", file=sys.stderr)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)

    rapt = best[rt.RAPT]
    out: list[str] = []
    w = out.append
    w("# pitchwire speed against reference trackers\n")
    w(f"Corpus `{a.corpus}`: {len(wavs)} files, {audio_s:.1f} s of audio at {', '.join(str(r) for r in sorted(rates))} Hz; "
      f"hop {a.hop_ms:g} ms; one process per file, one at a time; best of {a.repeats} repetitions.\n")
    w("| Tracker | Settings | Audio (s) | Wall, best (s) | All repetitions (s) | RTF | Throughput vs RAPT | Input conversion (s, not timed) |")
    w("|---|---|---:|---:|---|---:|---:|---:|")
    for name, _ in runners:
        settings = (f"`pitchwire analyze FILE --hop-ms {a.hop_ms:g}`" if name == "pitchwire analyze"
                    else rt.REF_SETTINGS[name].describe(name))
        prep = f"{prep_s[name]:.3f}" if name in prep_s else "-"
        w(f"| {name} | {settings} | {audio_s:.1f} | {best[name]:.3f} | "
          f"{', '.join(f'{t:.3f}' for t in all_times[name])} | {best[name] / audio_s:.4f} | {rapt / best[name]:.2f}x | {prep} |")
    w("")
    w("RTF = processing (wall) time / audio time; throughput vs RAPT = RAPT's best wall time / the tracker's. "
      "Times include process start-up and file reading for every tracker. SPTK's input is the converted raw "
      "float file, prepared beforehand.")
    ratio = rapt / best["pitchwire analyze"]
    ok = ratio >= BAR_THROUGHPUT_VS_RAPT
    if a.check:
        w(f"\nCheck: {'PASS' if ok else 'FAIL'}: pitchwire throughput {ratio:.2f}x RAPT's, bar >= "
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
