#!/usr/bin/env node
// The live page's pure parts in node, no browser: clients/web/pitch.js (semitones, note names with cents, the
// band-limit forms a supervisor types, number text) and the FrameStore of clients/web/contour.js (bounded
// ring, settled values replacing live ones, runs of voiced frames that never bridge a gap). Values known by
// construction or from the definitions in docs/measures.md. Prints PASS or FAIL per check; exit 1 on any
// failure.
//
// Usage: node units_test.js [--web DIR]   (DIR: clients/web, default: found from this file)
'use strict';

const path = require('node:path');

const webDir = (() => {
  const i = process.argv.indexOf('--web');
  return i > 0 ? path.resolve(process.argv[i + 1]) : path.resolve(__dirname, '../../../clients/web');
})();
const P = require(path.join(webDir, 'pitch.js'));
const { FrameStore } = require(path.join(webDir, 'contour.js'));

const { check, finish } = require('../checks.js');
const near = (a, b, tol) => Math.abs(a - b) <= tol;

// ---- pitch.js ------------------------------------------------------------------------------------------

// Semitones re a reference, 12 * log2(f / ref) (common practice): an octave is 12.
check('200 Hz is +12 st re 100 Hz', near(P.semitones(200, 100), 12, 1e-12));
check('+7 st re 100 Hz is 149.83 Hz', near(P.hzOfSemitones(7, 100), 149.8307, 1e-3));
// MIDI 69 = A4 = 440 Hz (ISO 16:1975); C4 = MIDI 60 (scientific pitch notation).
check('MIDI of 440 Hz is 69', near(P.midiOf(440), 69, 1e-12));
check('note names: 60 C4, 69 A4, 43 G2, 61 C#4, 23 B0, 11 B-1',
  ['C4', 'A4', 'G2', 'C#4', 'B0', 'B-1'].join() === [60, 69, 43, 61, 23, 11].map(P.noteName).join(),
  [60, 69, 43, 61, 23, 11].map(P.noteName).join());
// Equal temperament: G3 = 440 * 2^(-14/12) = 195.998 Hz.
check('G3 (196.0 Hz) reads "G3 ±0 ct"', P.formatNote(195.998) === 'G3 \u00b10 ct', P.formatNote(195.998));
check('12 cents above G3 reads "G3 +12 ct"', P.formatNote(195.998 * 2 ** (12 / 1200)) === 'G3 +12 ct',
  P.formatNote(195.998 * 2 ** (12 / 1200)));
check('30 cents below A4 reads "A4 \u221230 ct"', P.formatNote(440 * 2 ** (-30 / 1200)) === 'A4 \u221230 ct',
  P.formatNote(440 * 2 ** (-30 / 1200)));
// 100 Hz: MIDI 69 + 12 log2(100/440) = 43.35, G2 +35 cents.
check('100 Hz reads "G2 +35 ct"', P.formatNote(100) === 'G2 +35 ct', P.formatNote(100));
check('49 cents above A3 is still A3, 51 cents is A#3 -49',
  P.formatNote(220 * 2 ** (49 / 1200)) === 'A3 +49 ct' && P.formatNote(220 * 2 ** (51 / 1200)) === 'A#3 \u221249 ct',
  `${P.formatNote(220 * 2 ** (49 / 1200))}, ${P.formatNote(220 * 2 ** (51 / 1200))}`);

// Band limits as set_band reads them (docs/protocol.md): Hz, note names with sharps or flats, semitones.
check('note names: A3 220 Hz, C#4 277.18 Hz, Db5 554.37 Hz, a4 440 Hz',
  near(P.hzOfNoteName('A3'), 220, 1e-9) && near(P.hzOfNoteName('C#4'), 277.1826, 1e-3)
  && near(P.hzOfNoteName('Db5'), 554.3653, 1e-3) && near(P.hzOfNoteName('a4'), 440, 1e-9));
check('not note names: H3, A10, A#, empty', [P.hzOfNoteName('H3'), P.hzOfNoteName('A10'), P.hzOfNoteName('A#'),
  P.hzOfNoteName('')].every((x) => x === null));
check('a number (with or without Hz) goes out as a number', P.requestValue('165') === 165
  && P.requestValue(' 165.5 Hz ') === 165.5 && P.requestValue('220hz') === 220);
check('notes and semitones go out as the text typed', P.requestValue(' A3 ') === 'A3'
  && P.requestValue('+2st') === '+2st' && P.requestValue('-2.5 st') === '-2.5 st');
check('an empty field is no value', P.requestValue('   ') === null);
check('limitHz: +12st re 100 Hz is 200 Hz, -12 st is 50 Hz, G3 is 196 Hz, 165 Hz is 165',
  near(P.limitHz('+12st', 100), 200, 1e-9) && near(P.limitHz('-12 st', 100), 50, 1e-9)
  && near(P.limitHz('G3', 100), 195.998, 1e-3) && P.limitHz('165 Hz', 100) === 165);
check('limitHz: other text is null (the daemon answers bad_note)', P.limitHz('+-2st', 100) === null
  && P.limitHz('two', 100) === null);

check('durations: 42.3 s, 1:05, 1:01:01', P.formatDuration(42.26) === '42.3 s' && P.formatDuration(65) === '1:05'
  && P.formatDuration(3661) === '1:01:01', [42.26, 65, 3661].map(P.formatDuration).join(' | '));
check('counts with thin spaces: 78\u2009211', P.formatCount(78211.4) === '78\u2009211' && P.formatCount(999) === '999'
  && P.formatCount(1234567) === '1\u2009234\u2009567');

// ---- FrameStore ----------------------------------------------------------------------------------------

{
  const s = new FrameStore(16);
  for (let i = 0; i < 100; i += 1) s.push(i * 4, i * 0.02, 200, -20);
  check('the ring keeps its capacity (bounded memory): 16 of 100 frames, the newest',
    s.count === 16 && s.newestIndex === 99 * 4 && s.index[s.slot(0)] === 84 * 4, `${s.count} ${s.newestIndex}`);
  check('a frame not after the newest is refused (the stream started again)', s.push(8, 0.04, 200, -20) === false);
}
{
  const s = new FrameStore(64);
  for (let i = 0; i < 10; i += 1) s.push(i, i * 0.005, 200, -20);
  check('settled replaces the live value of its index', s.settle(6, 210) && s.f0[s.slot(6)] === 210
    && s.settled[s.slot(6)] === 1 && s.settledApplied === 1 && s.settledChanged === 1);
  check('settled null makes the frame unvoiced', s.settle(7, null) && Number.isNaN(s.f0[s.slot(7)]));
  check('settled for an index no longer (or never) stored is ignored', s.settle(100, 200) === false
    && s.settle(-3, 200) === false);
}
{
  // 20 voiced, 10 unvoiced, 20 voiced, index 55..59 missing (dropped), 20 voiced, 5 unvoiced at the end.
  const s = new FrameStore(256);
  let i = 0;
  const add = (n, f0) => { for (let k = 0; k < n; k += 1, i += 1) s.push(i, i * 0.005, f0, -20); };
  add(20, 200);
  add(10, null);
  add(20, 220);
  i += 5;
  add(20, 240);
  add(5, null);
  const { runs, gaps, unvoiced } = s.segments(-1, 1);
  check('runs end at unvoiced frames and at missing frames: 3 runs of 20', runs.length === 3
    && runs.every((r) => r.length === 20), runs.map((r) => r.length).join());
  check('two gaps between voiced frames (the trailing unvoiced frames are not one)', gaps === 2, String(gaps));
  check('15 unvoiced frames counted', unvoiced === 15, String(unvoiced));
  check('no run bridges a gap: each run holds one F0', runs.every((r) => r.every((p) => p.f0 === r[0].f0)));
  const late = s.segments(45 * 0.005, 1);
  check('segments from t0 leave earlier frames out: runs of 5 and 20', late.runs.length === 2
    && late.runs[0].length === 5 && late.runs[1].length === 20 && late.gaps === 1, late.runs.map((r) => r.length).join());
  const decimated = new FrameStore(64);
  for (let k = 0; k < 20; k += 1) decimated.push(k * 4, k * 0.02, 200, -20);
  check('with a decimation of 4, steps of 4 are not gaps', decimated.segments(-1, 4).runs.length === 1);
}

finish();
