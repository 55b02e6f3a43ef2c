// pitch.js: units and wording of the live page, with no DOM: semitones, note names with their cents offset,
// the band-limit forms a supervisor may type (the grammar of set_band, docs/protocol.md), and number text.
// Loaded by index.html as a classic script (window.PitchwirePitch) and by node in tests/clients/web.
'use strict';
(function (root) {
  const NAMES = ['C', 'C#', 'D', 'D#', 'E', 'F', 'F#', 'G', 'G#', 'A', 'A#', 'B'];
  const A4_HZ = 440; // ISO 16:1975
  const LETTER_PC = { A: 9, B: 11, C: 0, D: 2, E: 4, F: 5, G: 7 };
  const MINUS = '\u2212';

  // Semitones re a reference: 12 * log2(f / ref) (common practice; docs/measures.md).
  const semitones = (hz, refHz) => 12 * Math.log2(hz / refHz);
  const hzOfSemitones = (st, refHz) => refHz * 2 ** (st / 12);
  // MIDI note number, 69 + 12 * log2(f / 440) (A4 = 440 Hz, ISO 16:1975).
  const midiOf = (hz) => 69 + semitones(hz, A4_HZ);
  const hzOfMidi = (midi) => hzOfSemitones(midi - 69, A4_HZ);

  // Scientific pitch notation with sharps, C4 = MIDI 60 (as dsp::note_name).
  function noteName(midi) {
    const pc = ((midi % 12) + 12) % 12;
    return `${NAMES[pc]}${(midi - pc) / 12 - 1}`;
  }

  // The nearest equal-tempered note and the offset from it in cents, -50..+50.
  function nearestNote(hz) {
    const m = midiOf(hz);
    const midi = Math.round(m);
    return { name: noteName(midi), midi, cents: 100 * (m - midi) };
  }

  const signed = (value, digits = 0) => {
    const text = Math.abs(value).toFixed(digits);
    if (Number(text) === 0) return `\u00b1${text}`;
    return `${value < 0 ? MINUS : '+'}${text}`;
  };

  // "G3 +12 ct": the note and the whole cents from it.
  function formatNote(hz) {
    const n = nearestNote(hz);
    return `${n.name} ${signed(Math.round(n.cents))} ct`;
  }

  const formatHz = (hz, digits = 1) => `${hz.toFixed(digits)} Hz`;

  // A note name such as "A3", "C#4", "Db5" (octave -1..9), as dsp::hz_from_note_name; null otherwise.
  function hzOfNoteName(text) {
    const m = /^([A-Ga-g])(#|b)?(-?\d)$/.exec(text);
    if (!m) return null;
    const octave = Number(m[3]);
    if (octave < -1 || octave > 9) return null;
    const pc = LETTER_PC[m[1].toUpperCase()] + (m[2] === '#' ? 1 : m[2] === 'b' ? -1 : 0);
    return hzOfMidi(12 * (octave + 1) + pc);
  }

  // What a supervisor typed for a band limit or the reference, as the request will carry it: a number for Hz
  // ("165", "165 Hz", "165.5hz"), otherwise the text itself (a note name or semitones such as "-2st"), which
  // the daemon reads and, if it cannot, answers with bad_note. null for an empty field.
  function requestValue(text) {
    const t = String(text).trim();
    if (t === '') return null;
    const m = /^(\d+(?:\.\d+)?)\s*(?:hz)?$/i.exec(t);
    return m ? Number(m[1]) : t;
  }

  // The value in Hz that requestValue(text) stands for, with the reference for semitones; null when it is
  // none of the forms (the same grammar as protocol::parse_band_limit).
  function limitHz(text, refHz) {
    const v = requestValue(text);
    if (v === null) return null;
    if (typeof v === 'number') return v;
    const st = /^([+-]?\d+(?:\.\d+)?)\s*st$/.exec(v);
    if (st) return hzOfSemitones(Number(st[1]), refHz);
    return hzOfNoteName(v);
  }

  // Seconds as "42.3 s" under a minute, "m:ss" under an hour, "h:mm:ss" beyond.
  function formatDuration(seconds) {
    if (!Number.isFinite(seconds)) return '\u2013';
    if (seconds < 60) return `${seconds.toFixed(1)} s`;
    const s = Math.floor(seconds);
    const pad = (n) => String(n).padStart(2, '0');
    if (s < 3600) return `${Math.floor(s / 60)}:${pad(s % 60)}`;
    return `${Math.floor(s / 3600)}:${pad(Math.floor(s / 60) % 60)}:${pad(s % 60)}`;
  }

  // Whole numbers with a thin space between thousands: "78 211".
  function formatCount(n) {
    return String(Math.round(n)).replace(/\B(?=(\d{3})+(?!\d))/g, '\u2009');
  }

  const api = Object.freeze({
    A4_HZ, semitones, hzOfSemitones, midiOf, hzOfMidi, noteName, nearestNote, signed, formatNote, formatHz,
    hzOfNoteName, requestValue, limitHz, formatDuration, formatCount,
  });
  if (typeof module !== 'undefined' && module.exports) module.exports = api;
  else root.PitchwirePitch = api;
})(typeof globalThis !== 'undefined' ? globalThis : this);
