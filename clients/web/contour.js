// contour.js: the scrolling F0 contour of the live page.
//
// FrameStore keeps the frames of the longest window the page offers in a fixed ring (bounded memory): the
// live F0 of each frame as it arrives, replaced by its settled F0 when `settled` comes for the same index
// (docs/protocol.md). segments() cuts the stored frames into runs of voiced frames: an unvoiced frame, or
// frames that never arrived (an index step larger than the subscription's decimation), end a run, so the
// drawing never bridges a gap.
//
// ContourView draws them on a canvas on a semitone axis re the reference pitch, 12 * log2(f / ref), with a
// line per equal-tempered note (A4 = 440 Hz), note names on the left and Hz on the right, target bands
// shaded with their names, and markers and exercise starts and ends as vertical lines. It draws when asked
// (live.js asks from requestAnimationFrame) and keeps the geometry of its last drawing for hit tests.
//
// No DOM access outside ContourView; FrameStore and segments() also run in node (tests/clients/web).
'use strict';
(function (root) {
  const P = (typeof module !== 'undefined' && module.exports) ? require('./pitch.js') : root.PitchwirePitch;

  class FrameStore {
    constructor(capacity) {
      this.resize(capacity);
    }

    resize(capacity) {
      this.capacity = Math.max(16, Math.floor(capacity));
      this.index = new Float64Array(this.capacity);
      this.time = new Float64Array(this.capacity);
      this.f0 = new Float32Array(this.capacity);     // NaN when unvoiced
      this.level = new Float32Array(this.capacity);  // dBFS, NaN when not subscribed
      this.settled = new Uint8Array(this.capacity);  // 1 once the settled value replaced the live one
      this.clear();
    }

    clear() {
      this.start = 0;
      this.count = 0;
      this.settledApplied = 0;  // settled values stored (for the page's read-only debug counters)
      this.settledChanged = 0;  // ... of which differed from the live value
    }

    slot(k) {
      return (this.start + k) % this.capacity;
    }

    get newestIndex() {
      return this.count ? this.index[this.slot(this.count - 1)] : -1;
    }

    get newestTime() {
      return this.count ? this.time[this.slot(this.count - 1)] : NaN;
    }

    // A live frame. Returns false (and stores nothing) when its index is not after the newest one: the
    // stream started again, which the caller answers with clear().
    push(index, time, f0Hz, levelDbfs) {
      if (this.count && index <= this.newestIndex) return false;
      let s;
      if (this.count < this.capacity) {
        s = this.slot(this.count);
        this.count += 1;
      } else {
        s = this.start;  // the oldest goes
        this.start = (this.start + 1) % this.capacity;
      }
      this.index[s] = index;
      this.time[s] = time;
      this.f0[s] = f0Hz === null || f0Hz === undefined ? NaN : f0Hz;
      this.level[s] = levelDbfs === null || levelDbfs === undefined ? NaN : levelDbfs;
      this.settled[s] = 0;
      return true;
    }

    // The settled value of frame `index`: found by walking back from the newest (it is a settle lag old).
    settle(index, f0Hz) {
      for (let k = this.count - 1; k >= 0; k -= 1) {
        const s = this.slot(k);
        const i = this.index[s];
        if (i === index) {
          const value = f0Hz === null || f0Hz === undefined ? NaN : f0Hz;
          const before = this.f0[s];
          if (!(Number.isNaN(before) && Number.isNaN(value)) && before !== value) this.settledChanged += 1;
          this.f0[s] = value;
          this.settled[s] = 1;
          this.settledApplied += 1;
          return true;
        }
        if (i < index) return false;
      }
      return false;
    }

    // Runs of voiced frames with time >= t0, oldest first: arrays of {t, f0, settled}. A run ends at an unvoiced
    // frame and where frames are missing (index step > `step`, the subscription's decimation). Also counts
    // the gaps: places between two voiced frames of the window where the line is broken.
    segments(t0, step) {
      const runs = [];
      let run = null;
      let lastIndex = -Infinity;
      let gaps = 0;
      let unvoiced = 0;
      let sawVoiced = false;
      let broken = false;
      for (let k = 0; k < this.count; k += 1) {
        const s = this.slot(k);
        if (this.time[s] < t0) {
          lastIndex = this.index[s];
          continue;
        }
        const missing = this.index[s] - lastIndex > step;
        lastIndex = this.index[s];
        const f = this.f0[s];
        if (Number.isNaN(f) || missing) {
          if (run) runs.push(run);
          run = null;
          if (Number.isNaN(f)) unvoiced += 1;
          if (sawVoiced) broken = true;
          if (Number.isNaN(f)) continue;
        }
        if (broken) {
          gaps += 1;
          broken = false;
        }
        if (!run) run = [];
        run.push({ t: this.time[s], f0: f, settled: this.settled[s] === 1 });
        sawVoiced = true;
      }
      if (run) runs.push(run);
      return { runs, gaps, unvoiced };
    }
  }

  // Colours of the drawing (also the page's read-only palette() for tests). Bands take the fill and edge of
  // their slot, in the order their names first appeared.
  const PALETTE = Object.freeze({
    background: '#fffdf7',
    plotEdge: '#8a8577',
    grid: '#e4dfd2',
    gridC: '#bdb5a2',
    text: '#2a2823',
    mutedText: '#6a655a',
    contour: '#1b3f8f',
    contourHeadRing: '#fffdf7',
    marker: '#5b5850',
    exercise: '#a8431a',
    bandFill: Object.freeze(['#f6e2a8', '#c9ead7', '#e9d3f0', '#cfe2f5']),
    bandEdge: Object.freeze(['#8f6500', '#1f6e47', '#74408c', '#2d5e91']),
  });

  const MARGIN = Object.freeze({ left: 58, right: 66, top: 36, bottom: 28 });
  const MIN_SPAN_ST = 12;
  const DEFAULT_LOW_HZ = 110;
  const DEFAULT_HIGH_HZ = 330;

  class ContourView {
    constructor(canvas) {
      this.canvas = canvas;
      this.ctx = canvas.getContext('2d');
      this.range = null;  // [lo, hi] semitones re reference, kept while the data fits it well
      this.rangeRef = NaN;
      this.geometry = null;
      this.lastStats = { voicedPoints: 0, gaps: 0, runs: 0, unvoiced: 0, bandsDrawn: [], verticals: [] };
    }

    // Sizes the canvas to its box in device pixels; returns the CSS size.
    fit() {
      const dpr = (typeof window !== 'undefined' && window.devicePixelRatio) || 1;
      const w = Math.max(200, Math.round(this.canvas.clientWidth));
      const h = Math.max(160, Math.round(this.canvas.clientHeight));
      if (this.canvas.width !== Math.round(w * dpr) || this.canvas.height !== Math.round(h * dpr)) {
        this.canvas.width = Math.round(w * dpr);
        this.canvas.height = Math.round(h * dpr);
      }
      this.ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
      return { w, h, dpr };
    }

    // The semitone range to show: the voiced frames and the bands of the window, a semitone of air, at least
    // MIN_SPAN_ST, on even semitones; kept as long as the data fits in it and fills at least half of it, so
    // that the grid does not jump with every frame.
    chooseRange(model, runs, bands) {
      const ref = model.refHz;
      let lo = Infinity;
      let hi = -Infinity;
      for (const run of runs) {
        for (const p of run) {
          const st = P.semitones(p.f0, ref);
          if (st < lo) lo = st;
          if (st > hi) hi = st;
        }
      }
      for (const b of bands) {
        lo = Math.min(lo, P.semitones(b.low_hz, ref));
        hi = Math.max(hi, P.semitones(b.high_hz, ref));
      }
      if (!Number.isFinite(lo)) {
        lo = P.semitones(DEFAULT_LOW_HZ, ref);
        hi = P.semitones(DEFAULT_HIGH_HZ, ref);
      }
      const floor = P.semitones(model.f0Range.min, ref);
      const ceil = P.semitones(model.f0Range.max, ref);
      lo = Math.max(lo, floor);
      hi = Math.min(hi, ceil);
      if (this.range && this.rangeRef === ref) {
        const [cl, ch] = this.range;
        if (lo >= cl + 0.5 && hi <= ch - 0.5 && (hi - lo) >= 0.45 * (ch - cl)) return this.range;
      }
      let a = Math.floor((lo - 1) / 2) * 2;
      let b = Math.ceil((hi + 1) / 2) * 2;
      if (b - a < MIN_SPAN_ST) {
        const mid = Math.round((a + b) / 2);
        a = mid - MIN_SPAN_ST / 2;
        b = mid + MIN_SPAN_ST / 2;
      }
      this.range = [a, b];
      this.rangeRef = ref;
      return this.range;
    }

    // model: {store, step, t1, windowS, refHz, f0Range: {min, max}, bands: [{name, low_hz, high_hz, from, to,
    // slot}], verticals: [{kind: 'marker'|'exercise_start'|'exercise_end', t, label}], stale}
    draw(model) {
      const { w, h, dpr } = this.fit();
      const ctx = this.ctx;
      const x0 = MARGIN.left;
      const x1 = w - MARGIN.right;
      const y0 = MARGIN.top;
      const y1 = h - MARGIN.bottom;
      const t1 = Number.isFinite(model.t1) ? model.t1 : model.windowS;
      const t0 = t1 - model.windowS;
      const { runs, gaps, unvoiced } = model.store.segments(t0, model.step);
      const bands = model.bands.filter((b) => (b.to === null || b.to > t0) && b.from < t1);
      const [lo, hi] = this.chooseRange(model, runs, bands);
      const xOf = (t) => x0 + ((t - t0) / (t1 - t0)) * (x1 - x0);
      const yOfSt = (st) => y1 - ((st - lo) / (hi - lo)) * (y1 - y0);
      const yOfHz = (hz) => yOfSt(P.semitones(hz, model.refHz));
      this.geometry = Object.freeze({ x0, x1, y0, y1, t0, t1, stLow: lo, stHigh: hi, refHz: model.refHz, dpr, width: w, height: h });

      ctx.fillStyle = PALETTE.background;
      ctx.fillRect(0, 0, w, h);
      ctx.font = '13px system-ui, sans-serif';
      ctx.textBaseline = 'middle';

      // Bands, under everything else.
      const bandsDrawn = [];
      ctx.save();
      ctx.beginPath();
      ctx.rect(x0, y0, x1 - x0, y1 - y0);
      ctx.clip();
      for (const b of bands) {
        const bx0 = Math.max(x0, xOf(Math.max(b.from, t0)));
        const bx1 = b.to === null ? x1 : Math.min(x1, xOf(b.to));
        const by0 = yOfHz(b.high_hz);
        const by1 = yOfHz(b.low_hz);
        if (bx1 <= bx0) continue;
        ctx.fillStyle = PALETTE.bandFill[b.slot % PALETTE.bandFill.length];
        ctx.fillRect(bx0, by0, bx1 - bx0, by1 - by0);
        bandsDrawn.push({ band: b, name: b.name, x0: bx0, x1: bx1, y0: by0, y1: by1 });
      }
      ctx.restore();

      // Note lines (equal temperament, A4 = 440 Hz), names on the left, Hz on the right.
      const pxPerSt = (y1 - y0) / (hi - lo);
      const every = [1, 2, 3, 4, 6, 12].find((k) => k * pxPerSt >= 15) || 12;
      const midiLo = Math.ceil(P.midiOf(P.hzOfSemitones(lo, model.refHz)) - 1e-9);
      const midiHi = Math.floor(P.midiOf(P.hzOfSemitones(hi, model.refHz)) + 1e-9);
      ctx.lineWidth = 1;
      for (let m = midiLo; m <= midiHi; m += 1) {
        const pc = ((m % 12) + 12) % 12;
        const labelled = pc % every === 0;
        if (!labelled && pxPerSt < 4) continue;
        const y = Math.round(yOfHz(P.hzOfMidi(m))) + 0.5;
        ctx.strokeStyle = pc === 0 ? PALETTE.gridC : PALETTE.grid;
        ctx.beginPath();
        ctx.moveTo(x0, y);
        ctx.lineTo(x1, y);
        ctx.stroke();
        if (labelled) {
          ctx.fillStyle = pc === 0 ? PALETTE.text : PALETTE.mutedText;
          ctx.textAlign = 'right';
          ctx.fillText(P.noteName(m), x0 - 8, y);
          ctx.textAlign = 'left';
          const hz = P.hzOfMidi(m);
          ctx.fillText(`${hz < 100 ? hz.toFixed(1) : Math.round(hz)} Hz`, x1 + 8, y);
        }
      }

      // Time lines, seconds before the newest frame.
      const secStep = [1, 2, 5, 10].find((s) => (s / (t1 - t0)) * (x1 - x0) >= 70) || 10;
      ctx.textAlign = 'center';
      ctx.textBaseline = 'top';
      for (let s = 0; s <= model.windowS + 1e-9; s += secStep) {
        const x = Math.round(xOf(t1 - s)) + 0.5;
        ctx.strokeStyle = PALETTE.grid;
        ctx.beginPath();
        ctx.moveTo(x, y0);
        ctx.lineTo(x, y1);
        ctx.stroke();
        ctx.fillStyle = PALETTE.mutedText;
        ctx.fillText(s === 0 ? 'now' : `${P.signed(-s)} s`, x, y1 + 6);
      }

      // Band names and edges (dashed: the edge is part of the band's sign, not only its colour).
      ctx.save();
      ctx.beginPath();
      ctx.rect(x0, y0, x1 - x0, y1 - y0);
      ctx.clip();
      ctx.setLineDash([6, 4]);
      ctx.lineWidth = 1.5;
      for (const d of bandsDrawn) {
        const b = d.band;
        const edge = PALETTE.bandEdge[b.slot % PALETTE.bandEdge.length];
        ctx.strokeStyle = edge;
        for (const y of [d.y0, d.y1]) {
          ctx.beginPath();
          ctx.moveTo(d.x0, y);
          ctx.lineTo(d.x1, y);
          ctx.stroke();
        }
        ctx.fillStyle = edge;
        ctx.font = 'bold 14px system-ui, sans-serif';
        ctx.textAlign = 'left';
        ctx.textBaseline = d.y1 - d.y0 >= 20 ? 'top' : 'bottom';
        const ty = d.y1 - d.y0 >= 20 ? d.y0 + 3 : d.y0 - 2;
        const label = `${b.name} ${Math.round(b.low_hz)}\u2013${Math.round(b.high_hz)} Hz`;
        // At the band's start, or moved left so that a band set a moment ago still shows its whole name.
        ctx.fillText(label, Math.max(x0 + 6, Math.min(d.x0 + 6, x1 - 6 - ctx.measureText(label).width)), ty);
      }
      ctx.restore();

      // Markers and exercises: vertical lines with a short label above the plot, in one of two rows so that
      // labels close together do not overwrite each other.
      const verticals = [];
      const rowEnds = [-Infinity, -Infinity];
      ctx.save();
      ctx.font = '12px system-ui, sans-serif';
      ctx.textBaseline = 'bottom';
      ctx.textAlign = 'left';
      for (const v of [...model.verticals].sort((a, b) => a.t - b.t)) {
        if (v.t < t0 || v.t > t1) continue;
        const x = Math.round(xOf(v.t)) + 0.5;
        const exercise = v.kind !== 'marker';
        ctx.strokeStyle = exercise ? PALETTE.exercise : PALETTE.marker;
        ctx.lineWidth = exercise ? 2 : 1.5;
        ctx.setLineDash(v.kind === 'exercise_start' ? [] : v.kind === 'exercise_end' ? [8, 3] : [3, 3]);
        ctx.beginPath();
        ctx.moveTo(x, y0);
        ctx.lineTo(x, y1);
        ctx.stroke();
        const sign = v.kind === 'exercise_start' ? '\u25b6 ' : v.kind === 'exercise_end' ? '\u25a0 ' : '\u25c6 ';
        ctx.fillStyle = exercise ? PALETTE.exercise : PALETTE.marker;
        const label = (sign + v.label).slice(0, 40);
        const width = ctx.measureText(label).width;
        const lx = Math.max(x0, Math.min(x + 3, x1 - width));
        const row = rowEnds[0] + 8 <= lx ? 0 : rowEnds[1] + 8 <= lx ? 1 : (rowEnds[0] <= rowEnds[1] ? 0 : 1);
        rowEnds[row] = lx + width;
        ctx.fillText(label, lx, y0 - 3 - 15 * row);
        verticals.push({ kind: v.kind, x, t: v.t });
      }
      ctx.restore();

      // The contour: one path per run of voiced frames, never across a gap.
      let voicedPoints = 0;
      ctx.save();
      ctx.beginPath();
      ctx.rect(x0, y0, x1 - x0, y1 - y0);
      ctx.clip();
      ctx.strokeStyle = PALETTE.contour;
      ctx.fillStyle = PALETTE.contour;
      ctx.lineWidth = 3;
      ctx.lineJoin = 'round';
      ctx.lineCap = 'round';
      for (const run of runs) {
        voicedPoints += run.length;
        if (run.length === 1) {
          ctx.beginPath();
          ctx.arc(xOf(run[0].t), yOfHz(run[0].f0), 2, 0, 2 * Math.PI);
          ctx.fill();
          continue;
        }
        ctx.beginPath();
        run.forEach((p, i) => (i ? ctx.lineTo(xOf(p.t), yOfHz(p.f0)) : ctx.moveTo(xOf(p.t), yOfHz(p.f0))));
        ctx.stroke();
      }
      // The newest frame, when voiced: a ringed dot where the voice is now.
      const last = runs.length ? runs[runs.length - 1] : null;
      const newest = last && last[last.length - 1];
      if (newest && newest.t === model.store.newestTime && !model.stale) {
        ctx.beginPath();
        ctx.arc(xOf(newest.t), yOfHz(newest.f0), 6, 0, 2 * Math.PI);
        ctx.fill();
        ctx.lineWidth = 2;
        ctx.strokeStyle = PALETTE.contourHeadRing;
        ctx.stroke();
      }
      ctx.restore();

      // Frame and caption.
      ctx.strokeStyle = PALETTE.plotEdge;
      ctx.lineWidth = 1;
      ctx.setLineDash([]);
      ctx.strokeRect(x0 + 0.5, y0 + 0.5, x1 - x0 - 1, y1 - y0 - 1);
      if (model.stale) {
        ctx.fillStyle = PALETTE.text;
        ctx.font = 'bold 18px system-ui, sans-serif';
        ctx.textAlign = 'center';
        ctx.textBaseline = 'middle';
        ctx.fillText('no connection: the contour is not live', (x0 + x1) / 2, (y0 + y1) / 2);
      }

      this.lastStats = Object.freeze({
        voicedPoints, gaps, runs: runs.length, unvoiced, bandsDrawn: Object.freeze(bandsDrawn.map((b) => b.name)),
        verticals: Object.freeze(verticals),
      });
      return this.lastStats;
    }
  }

  const api = Object.freeze({ FrameStore, ContourView, PALETTE });
  if (typeof module !== 'undefined' && module.exports) module.exports = api;
  else root.PitchwireContour = api;
})(typeof globalThis !== 'undefined' ? globalThis : this);
