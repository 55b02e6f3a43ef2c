#!/usr/bin/python3
"""pitchwire against SPTK RAPT on synthetic speech from espeak-ng.

  espeak_vs_rapt.py --pitchwire PATH [--quick] [--jobs 2] [--keep DIR]

espeak-ng speaks sentences written for this test in several voices and variants. Its exact F0 is not
known, so RAPT (Talkin 1995, in Kleijn & Paliwal, Speech Coding and Synthesis; from Debian's sptk) serves as the reference
library: pitchwire's settled F0 (`pitchwire analyze`, hop 5 ms, default 50-1400 Hz search) is compared
with RAPT's at each pitchwire frame (RAPT frame nearest in time, after RAPT's measured +6 ms frame-time
offset; see bench/README.md). RAPT runs with the search range 50-800 Hz, which covers these voices.

Bars, on the figures pooled over all voices (exit status 1 when one fails; each voice's figures are
printed too, marked when they are below a bar, for information):
  - F0 agreement: on frames voiced in both, at least 95 % within 50 cents of RAPT (the RPA tolerance of
    Chu & Alwan 2009, used here between two trackers);
  - voicing agreement: at least 90 % of all frames get the same voiced/unvoiced call.
"""
from __future__ import annotations

import argparse
import concurrent.futures as cf
import os
import shutil
import subprocess
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "bench"))
import reftrackers as rt  # noqa: E402

import numpy as np  # noqa: E402  (reftrackers reports a missing numpy plainly)

BAR_F0_AGREEMENT = 0.95
BAR_VOICING_AGREEMENT = 0.90
AGREE_CENTS = 50.0
RAPT_RANGE = (50.0, 800.0)
HOP_MS = 5.0

SENTENCES = {
    "en": ["The morning train was late again, so we walked along the river and counted the boats.",
           "Could you bring the blue folder when you come over tomorrow evening?",
           "Seven old maps were rolled up inside the wooden box in the attic."],
    "de": ["Am Abend gingen wir langsam am Ufer entlang und sprachen über den nächsten Sommer.",
           "Kannst du mir bitte sagen, wann der letzte Bus heute fährt?"],
    "fr": ["Le matin, nous avons pris le petit chemin qui mène au vieux moulin près de la rivière.",
           "Est-ce que tu pourrais fermer la fenêtre avant de partir ce soir ?"],
    "es": ["Ayer por la tarde caminamos por la playa mientras el sol se escondía detrás de las nubes.",
           "¿Sabes a qué hora abre la biblioteca los domingos?"],
}

# (voice, extra espeak-ng options). Variants from `espeak-ng --voices=variant`; -p sets the pitch (0-99).
VOICES = [
    ("en", []), ("en+f3", []), ("en+m3", []), ("en+f5", []), ("en+m7", ["-p", "30"]), ("en+f2", ["-p", "75"]),
    ("de", []), ("de+f2", []), ("fr", []), ("fr+f4", []), ("es", []), ("es+m5", []),
]
QUICK_VOICES = [("en", []), ("en+f3", []), ("de+f2", [])]


class Tally:
    def __init__(self) -> None:
        self.files = 0
        self.frames = 0
        self.both = 0
        self.agree = 0
        self.same_call = 0
        self.live_both = 0
        self.live_agree = 0

    def __iadd__(self, o: "Tally") -> "Tally":
        for k in vars(self):
            setattr(self, k, getattr(self, k) + getattr(o, k))
        return self

    @property
    def f0_agreement(self) -> float:
        return self.agree / self.both if self.both else float("nan")

    @property
    def voicing_agreement(self) -> float:
        return self.same_call / self.frames if self.frames else float("nan")

    @property
    def live_agreement(self) -> float:
        return self.live_agree / self.live_both if self.live_both else float("nan")


def compare(pw: dict, rapt: rt.Track) -> Tally:
    """pitchwire frames against the nearest RAPT frame (RAPT's times already carry its offset)."""
    st, lv = pw[rt.SETTLED], pw[rt.LIVE]
    t = st.times
    if len(rapt.times) < 2:
        raise RuntimeError("RAPT returned fewer than two frames")
    hop = rapt.times[1] - rapt.times[0]
    j = np.rint((t - rapt.times[0]) / hop).astype(np.int64)
    ok = (j >= 0) & (j < len(rapt.times))
    ref = np.zeros(len(t))
    ref[ok] = rapt.f0[j[ok]]
    t_ok = ok
    est, live = st.f0[t_ok], lv.f0[t_ok]
    ref = ref[t_ok]
    y = Tally()
    y.files = 1
    y.frames = int(len(est))
    both = (est > 0) & (ref > 0)
    y.both = int(both.sum())
    y.agree = int((np.abs(rt.cents(est[both], ref[both])) <= AGREE_CENTS).sum())
    y.same_call = int(((est > 0) == (ref > 0)).sum())
    lb = (live > 0) & (ref > 0)
    y.live_both = int(lb.sum())
    y.live_agree = int((np.abs(rt.cents(live[lb], ref[lb])) <= AGREE_CENTS).sum())
    return y


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pitchwire", required=True)
    ap.add_argument("--quick", action="store_true", help="three voices, one sentence each (for CI)")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--keep", help="keep the spoken WAV files in this folder")
    a = ap.parse_args(argv)
    for prog, pkg in (("espeak-ng", "espeak-ng"), ("sptk", "sptk")):
        if not shutil.which(prog):
            sys.exit(f"{prog} not found: install the Debian package {pkg}")

    voices = QUICK_VOICES if a.quick else VOICES
    work = a.keep or tempfile.mkdtemp(prefix="pw-espeak-")
    os.makedirs(work, exist_ok=True)
    rapt_settings = rt.RefSettings(resample_16k=rt.REF_SETTINGS[rt.RAPT].resample_16k,
                                   f0_min=RAPT_RANGE[0], f0_max=RAPT_RANGE[1])
    items = []
    for voice, opts in voices:
        lang = voice.split("+")[0]
        sentences = SENTENCES[lang][:1] if a.quick else SENTENCES[lang]
        for i, text in enumerate(sentences):
            items.append((voice, opts, i, text))

    def job(item):
        voice, opts, i, text = item
        tag = (voice + "".join(opts)).replace("+", "_").replace("-", "")
        wav = os.path.join(work, f"{tag}_{i}.wav")
        p = subprocess.run(["espeak-ng", "-v", voice, *opts, "-w", wav, text], capture_output=True)
        if p.returncode != 0:
            raise RuntimeError(f"espeak-ng -v {voice}: {p.stderr.decode(errors='replace').strip()}")
        d = tempfile.mkdtemp(dir=work)
        try:
            rapt = rt.run_reference(rt.RAPT, wav, HOP_MS, rapt_settings, tmpdir=d)
        finally:
            shutil.rmtree(d, ignore_errors=True)
        pw = rt.run_pitchwire(a.pitchwire, wav, HOP_MS)
        return voice + (" " + " ".join(opts) if opts else ""), compare(pw, rapt)

    per_voice: dict[str, Tally] = {}
    try:
        with cf.ThreadPoolExecutor(max_workers=max(1, a.jobs)) as ex:
            for label, tally in ex.map(job, items):
                per_voice.setdefault(label, Tally())
                per_voice[label] += tally
    finally:
        if not a.keep:
            shutil.rmtree(work, ignore_errors=True)

    pooled = Tally()
    for t in per_voice.values():
        pooled += t
    print(f"pitchwire (settled, hop {HOP_MS:g} ms) against SPTK RAPT ({rapt_settings.describe(rt.RAPT)}) "
          "on espeak-ng speech")
    print(f"bars: F0 agreement within {AGREE_CENTS:g} cents on frames voiced in both >= {BAR_F0_AGREEMENT:.0%}; "
          f"voicing agreement over all frames >= {BAR_VOICING_AGREEMENT:.0%}\n")
    print("| Voice | Sentences | Frames | Voiced in both | F0 agreement | Voicing agreement | Live F0 agreement | Result |")
    print("|---|---:|---:|---:|---:|---:|---:|---|")
    failures = []
    for label, t in list(per_voice.items()) + [("pooled", pooled)]:
        gated = label == "pooled"
        bad = []
        if not t.f0_agreement >= BAR_F0_AGREEMENT:
            bad.append(f"F0 agreement {t.f0_agreement:.3f} < {BAR_F0_AGREEMENT}")
        if not t.voicing_agreement >= BAR_VOICING_AGREEMENT:
            bad.append(f"voicing agreement {t.voicing_agreement:.3f} < {BAR_VOICING_AGREEMENT}")
        if gated:
            failures += [f"{label}: {b}" for b in bad]
        result = ("FAIL" if gated else "below bar") if bad else "pass"
        print(f"| {label} | {t.files} | {t.frames} | {t.both} | {t.f0_agreement:.2%} | {t.voicing_agreement:.2%} "
              f"| {t.live_agreement:.2%} | {result} |")
    if failures:
        print("\nFAILED: " + "; ".join(failures))
        return 1
    print(f"\nbars met on the pooled figures ({len(per_voice)} voices)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
