#!/usr/bin/python3
"""Accuracy of `pitchwire analyze` against the reference trackers on a corpus with exact F0 truth.

  accuracy.py --pitchwire PATH --corpus DIR [--make-corpus PATH_TO_pitchwire-corpus [--quick] [--seed N]]
              [--jobs 2] [--hop-ms 5] [--check] [--out FILE.md]

Scores pitchwire's settled and live columns and SPTK RAPT, SWIPE', aubio yin and yinfft with the same
metrics (GPE, VDE, FPE, RPA: see reftrackers.py and bench/README.md) and prints one markdown table: pooled
over all files (frames pooled), then per condition (noise kind x SNR, and level) and per kind of material.
With --check, exits 1 unless pitchwire meets every bar; the bars are printed at the end, each with PASS or
FAIL (settled RPA >= 0.97, GPE <= 1 %, VDE <= 3 %; live RPA >= 0.95; settled RPA and GPE better than every
reference; best diagnostic shift of settled and live within one hop of 0).
With --check-floors (what CI runs), the comparative bars, the shift and the run itself must pass, and the
absolute figures must stay above the regression floors (FLOOR_* below); the absolute bars are still printed
with PASS or FAIL, for information.
"""
from __future__ import annotations

import argparse
import concurrent.futures as cf
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import reftrackers as rt  # noqa: E402

# Bars for --check, pooled over every file of the corpus.
BAR_SETTLED_RPA = 0.97
BAR_SETTLED_GPE = 0.01
BAR_SETTLED_VDE = 0.03
BAR_LIVE_RPA = 0.95

# Regression floors for --check-floors on the quick corpus (seed 1), set a little below what the tracker
# reached when they were last set (settled RPA 0.938, GPE 0.98 %, VDE 3.15 %, live RPA 0.916). They
# guard against losing ground; they are not the targets above. Raise them as the tracker improves.
FLOOR_SETTLED_RPA = 0.93
FLOOR_SETTLED_GPE = 0.012
FLOOR_SETTLED_VDE = 0.036
FLOOR_LIVE_RPA = 0.905


def group_labels(m: dict[str, str], levels: set[str]) -> list[str]:
    """The groups a corpus file is pooled into besides `all`."""
    cond = (m.get("condition") or "").strip() or "unknown"
    snr = (m.get("snr_db") or "").strip()
    labels = [f"condition: {cond}" + (f" {snr} dB SNR" if snr and cond != "clean" else "")]
    level = (m.get("level") or "").strip()
    if len(levels) > 1 and level:
        try:
            float(level)
            labels.append(f"level: {level} dBFS")
        except ValueError:
            labels.append(f"level: {level}")
    labels.append(f"kind: {(m.get('kind') or '').strip() or 'unknown'}")
    return labels


def group_order(label: str) -> tuple:
    kinds = {"all": 0, "condition": 1, "level": 2, "kind": 3}
    head, _, rest = label.partition(": ")
    cond_order = {"clean": 0, "white": 1, "pink": 2, "hum": 3, "voice": 4}
    parts = rest.split()
    first = cond_order.get(parts[0], 9) if parts else 9
    try:
        num = -float(parts[1]) if len(parts) > 1 else 0.0
    except ValueError:
        num = 0.0
    return (kinds.get(head, 9), first, num, rest)


def fmt(v: float, scale: float = 1.0, digits: int = 2) -> str:
    return "n/a" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v * scale:.{digits}f}"


def make_corpus(exe: str, outdir: str, quick: bool, seed: int | None) -> None:
    cmd = [exe, outdir] + (["--quick"] if quick else []) + (["--seed", str(seed)] if seed is not None else [])
    print(f"making corpus: {' '.join(cmd)}", file=sys.stderr)
    p = subprocess.run(cmd)
    if p.returncode != 0:
        sys.exit(f"corpus generator exited {p.returncode}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pitchwire", required=True, help="the pitchwire program")
    ap.add_argument("--corpus", required=True, help="corpus folder (manifest.csv, NAME.wav, NAME.f0.csv)")
    ap.add_argument("--make-corpus", metavar="PITCHWIRE_CORPUS", help="generate the corpus into --corpus first")
    ap.add_argument("--quick", action="store_true", help="with --make-corpus: the small corpus")
    ap.add_argument("--seed", type=int, help="with --make-corpus: generator seed")
    ap.add_argument("--jobs", type=int, default=2, help="tracker runs at once (default 2)")
    ap.add_argument("--hop-ms", type=float, default=rt.HOP_MS, help="frame step for every tracker (default 5)")
    ap.add_argument("--check", action="store_true", help="exit 1 unless pitchwire meets the bars")
    ap.add_argument("--check-floors", action="store_true",
                    help="exit 1 unless pitchwire beats every reference, keeps its timestamps and stays above the "
                         "regression floors (what CI runs)")
    ap.add_argument("--out", help="also write the report to this markdown file")
    a = ap.parse_args(argv)

    if a.make_corpus:
        make_corpus(a.make_corpus, a.corpus, a.quick, a.seed)
    manifest = rt.read_manifest(a.corpus)
    if not manifest:
        sys.exit(f"{a.corpus}: empty manifest")
    levels = {(m.get("level") or "").strip() for m in manifest}
    truths = {m["name"]: rt.read_truth(os.path.join(a.corpus, m["name"] + ".f0.csv")) for m in manifest}
    audio_s = {}
    for m in manifest:
        rate, x = rt.read_wav(os.path.join(a.corpus, m["name"] + ".wav"))
        audio_s[m["name"]] = len(x) / rate

    work = tempfile.mkdtemp(prefix="pw-accuracy-")
    errors: list[str] = []

    def job(kind: str, m: dict) -> tuple[str, dict[str, rt.Score]]:
        wav = os.path.join(a.corpus, m["name"] + ".wav")
        truth = truths[m["name"]]
        try:
            if kind == "pitchwire":
                tracks = rt.run_pitchwire(a.pitchwire, wav, a.hop_ms)
                return m["name"], {n: rt.score(t, truth) for n, t in tracks.items()}
            d = tempfile.mkdtemp(dir=work)
            try:
                return m["name"], {kind: rt.score(rt.run_reference(kind, wav, a.hop_ms, tmpdir=d), truth)}
            finally:
                shutil.rmtree(d, ignore_errors=True)
        except Exception as e:  # reported below; pitchwire failures fail the run
            errors.append(f"{kind} on {m['name']}: {e}")
            return m["name"], {}

    t0 = time.perf_counter()
    per_file: dict[str, dict[str, rt.Score]] = {m["name"]: {} for m in manifest}
    tasks = [(k, m) for m in manifest for k in ["pitchwire"] + rt.REFERENCE_NAMES]
    with cf.ThreadPoolExecutor(max_workers=max(1, a.jobs)) as ex:
        for name, scores in ex.map(lambda t: job(*t), tasks):
            per_file[name].update(scores)
    elapsed = time.perf_counter() - t0
    shutil.rmtree(work, ignore_errors=True)

    groups: dict[str, dict[str, rt.Score]] = {}
    for m in manifest:
        for g in ["all"] + group_labels(m, levels):
            gs = groups.setdefault(g, {n: rt.Score() for n in rt.TRACKER_NAMES})
            for n, sc in per_file[m["name"]].items():
                gs[n] += sc
    group_files: dict[str, int] = {}
    group_audio: dict[str, float] = {}
    for m in manifest:
        for g in ["all"] + group_labels(m, levels):
            group_files[g] = group_files.get(g, 0) + 1
            group_audio[g] = group_audio.get(g, 0.0) + audio_s[m["name"]]

    rates = sorted({int(m.get("sample_rate_hz") or 0) for m in manifest})
    out: list[str] = []
    w = out.append
    w("# pitchwire accuracy against reference trackers\n")
    w(f"Corpus `{a.corpus}`: {len(manifest)} files, {sum(audio_s.values()):.1f} s of audio, "
      f"sample rates {', '.join(str(r) for r in rates)} Hz. Hop {a.hop_ms:g} ms for every tracker; "
      f"truth read at each frame's time (nearest 1 ms truth sample). Run took {elapsed:.1f} s with "
      f"{a.jobs} job(s) at once.\n")
    w("Trackers and settings:\n")
    w(f"- {rt.SETTLED} / {rt.LIVE}: `pitchwire analyze FILE --hop-ms {a.hop_ms:g}` (default search range "
      "50-1400 Hz), columns f0_hz and f0_live_hz, time_s used as printed (no shift).")
    offsets = {rt.RAPT: f"frame time k·hop + {rt.RAPT_OFFSET_S * 1000:g} ms",
               rt.SWIPE: f"frame time k·hop + {rt.SWIPE_OFFSET_S * 1000:g} ms",
               rt.YIN: "frame time = printed time + hop - 3/4 buffer",
               rt.YINFFT: "frame time = printed time + hop - 1/2 buffer"}
    for n in rt.REFERENCE_NAMES:
        w(f"- {n}: {rt.REF_SETTINGS[n].describe(n)}; {offsets[n]} (measured, bench/README.md).")
    w("")
    w("| Group | Tracker | Files | Frames | RPA | GPE % | VDE % | FPE sd (cents) | Mean abs (cents) "
      "| Best shift (ms) | Wall (s) | RTF |")
    w("|---|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    for g in sorted(groups, key=group_order):
        for n in rt.TRACKER_NAMES:
            s = groups[g][n]
            if s.files == 0:
                w(f"| {g} | {n} | 0 | - | failed | | | | | | | |")
                continue
            rtf = s.seconds / group_audio[g] if group_audio[g] else float("nan")
            w(f"| {g} | {n} | {s.files} | {s.frames} | {fmt(s.rpa, 1, 4)} | {fmt(s.gpe, 100)} | {fmt(s.vde, 100)} "
              f"| {fmt(s.fpe_sd_cents, 1, 1)} | {fmt(s.fpe_mean_abs_cents, 1, 1)} | {fmt(s.best_shift_ms, 1, 1)} "
              f"| {s.seconds:.2f} | {fmt(rtf, 1, 4)} |")
    w("")
    w("Metrics (Rabiner et al. 1976; Chu & Alwan 2009), frames pooled over the "
      "files of each group:")
    w("- RPA: reference-voiced frames estimated voiced and within 50 cents, over reference-voiced frames.")
    w("- GPE: frames voiced in both with |f_est/f_ref - 1| > 20 %, over frames voiced in both.")
    w("- VDE: frames whose voiced/unvoiced call differs from the truth, over all frames.")
    w("- FPE: standard deviation of the error in cents over voiced-in-both frames without a gross error; "
      "mean abs: the mean absolute error in cents over the same frames.")
    w("- Best shift: diagnostic, not applied. The shift s in -50..+50 ms (1 ms steps) that maximises RPA "
      "when the truth is read at frame time + s; positive = the values describe a later instant than stamped.")
    w(f"- Wall: the tracker processes' wall time summed over the group's files ({a.jobs} at once; pitchwire's "
      "settled and live values come from the same run); RTF = wall / audio seconds. SPTK's input conversion "
      "is not included. See speed.py for a timing run without parallel load.")
    if errors:
        w("\nErrors:")
        for e in errors:
            w(f"- {e}")

    failures: list[str] = []
    if a.check or a.check_floors:
        al = groups["all"]
        st, lv = al[rt.SETTLED], al[rt.LIVE]
        absolute = [
            (f"pitchwire settled RPA {fmt(st.rpa, 1, 4)} >= {BAR_SETTLED_RPA}", st.rpa >= BAR_SETTLED_RPA),
            (f"pitchwire settled GPE {fmt(st.gpe, 100)} % <= {BAR_SETTLED_GPE * 100:g} %", st.gpe <= BAR_SETTLED_GPE),
            (f"pitchwire settled VDE {fmt(st.vde, 100)} % <= {BAR_SETTLED_VDE * 100:g} %", st.vde <= BAR_SETTLED_VDE),
            (f"pitchwire live RPA {fmt(lv.rpa, 1, 4)} >= {BAR_LIVE_RPA}", lv.rpa >= BAR_LIVE_RPA),
        ]
        bars = [] if a.check_floors else absolute
        if a.check_floors:
            bars += [
                (f"floor: pitchwire settled RPA {fmt(st.rpa, 1, 4)} >= {FLOOR_SETTLED_RPA}", st.rpa >= FLOOR_SETTLED_RPA),
                (f"floor: pitchwire settled GPE {fmt(st.gpe, 100)} % <= {FLOOR_SETTLED_GPE * 100:g} %",
                 st.gpe <= FLOOR_SETTLED_GPE),
                (f"floor: pitchwire settled VDE {fmt(st.vde, 100)} % <= {FLOOR_SETTLED_VDE * 100:g} %",
                 st.vde <= FLOOR_SETTLED_VDE),
                (f"floor: pitchwire live RPA {fmt(lv.rpa, 1, 4)} >= {FLOOR_LIVE_RPA}", lv.rpa >= FLOOR_LIVE_RPA),
            ]
        for n in rt.REFERENCE_NAMES:
            r = al[n]
            if r.files == 0:
                continue
            bars.append((f"pitchwire settled RPA {fmt(st.rpa, 1, 4)} > {n} RPA {fmt(r.rpa, 1, 4)}", st.rpa > r.rpa))
            bars.append((f"pitchwire settled GPE {fmt(st.gpe, 100)} % < {n} GPE {fmt(r.gpe, 100)} %",
                         st.gpe < r.gpe or (st.gpe == 0.0 and r.gpe == 0.0)))
        for n, s in ((rt.SETTLED, st), (rt.LIVE, lv)):
            bars.append((f"{n} best diagnostic shift {fmt(s.best_shift_ms, 1, 1)} ms within ±{a.hop_ms:g} ms (1 hop)",
                         abs(s.best_shift_ms) <= a.hop_ms))
        pw_errors = [e for e in errors if e.startswith("pitchwire")]
        bars.append((f"pitchwire ran on every file ({len(pw_errors)} failures)", not pw_errors))
        w("\nChecks (pooled over all files):")
        for text, ok in bars:
            w(f"- {'PASS' if ok else 'FAIL'}: {text}")
            if not ok or (isinstance(ok, float) and math.isnan(ok)):
                failures.append(text)
        if a.check_floors:
            w("\nTarget bars (information only under --check-floors):")
            for text, ok in absolute:
                w(f"- {'PASS' if ok else 'FAIL'}: {text}")
    report = "\n".join(out) + "\n"
    sys.stdout.write(report)
    if a.out:
        with open(a.out, "w") as f:
            f.write(report)
    if (a.check or a.check_floors) and failures:
        print(f"\naccuracy check FAILED: {len(failures)} bar(s): " + "; ".join(failures), file=sys.stderr)
        return 1
    if a.check or a.check_floors:
        print("\naccuracy check passed", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
