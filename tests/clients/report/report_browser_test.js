#!/usr/bin/env node
// The page of `pitchwire report`, rendered in headless Debian Chromium (driven by playwright-core, which
// downloads no browser) and checked by its pixels.
//
// 1. Writes a session folder whose content is known by construction (the line formats of
//    daemon/src/recorder.cpp): 2 s at 196 Hz (G3), 0.5 s unvoiced, 2 s at 247 Hz (B3), a 1.5 s glide up to
//    330 Hz (E4), 0.5 s unvoiced; band "target" 180-220 Hz set at t = 0 by a band_changed line; one exercise
//    (0.5 to 4.0 s) with its exercise file; two markers, the first with a hostile label.
// 2. Runs `pitchwire report` on it and checks the file's mode (0600).
// 3. Opens the page with every request but the page itself refused (and counted), takes a screenshot of the
//    contour chart, decodes its pixels in a blank page (canvas getImageData), and checks them at positions
//    computed from the chart's own mapping (data-x: x = a + b * t; data-y: y = c + d * semitone, in viewBox
//    units; semitone = 69 + 12 * log2(f / 440), the MIDI scale, ISO 16:1975 for A4):
//    - the contour colour at y(196 Hz) during 0-2 s and at y(247 Hz) during 2.5-4.5 s, and nowhere else in
//      those columns;
//    - no contour colour at any height within the gap (2-2.5 s): the line does not bridge it;
//    - the band's colour inside the 180-220 Hz rows and nowhere outside them;
//    - the hostile marker label shown as text, no dialog, no console error, no request.
// The screenshots stay in --out (printed). Prints PASS or FAIL per check and "N passed, N failed"; exit 1 on
// any failure.
//
// Usage: node report_browser_test.js --pitchwire EXE --modules DIR --chromium /usr/bin/chromium --out DIR
//   --modules: the folder where `npm ci` installed playwright-core (node_modules inside it).
'use strict';

const fs = require('node:fs');
const path = require('node:path');
const { execFileSync } = require('node:child_process');
const { pathToFileURL } = require('node:url');

const { check, finish, parseArgs, playwrightChromium } = require('../checks.js');

const args = parseArgs(process.argv, ['pitchwire', 'modules', 'chromium', 'out']);
const chromium = playwrightChromium(args.modules);


// ---- 1. the session, by construction -----------------------------------------------------------------------

const HOP = 0.005;
const HOSTILE = '<script>alert(1)</script>';
const MARKERS = [
  { t: 1.0, label: HOSTILE, data: { trial: 1, note: '</code><b>x</b>' } },
  { t: 3.5, label: 'trial 2 onset' },
];
const GLIDE_FROM = 247.0;
const GLIDE_TO = 330.0;

// F0 at time t, or null when unvoiced.
function f0At(t) {
  if (t < 2.0) return 196.0;
  if (t < 2.5) return null;
  if (t < 4.5) return 247.0;
  if (t < 6.0) return GLIDE_FROM * (GLIDE_TO / GLIDE_FROM) ** ((t - 4.5) / 1.5);
  return null;
}

function writeSession(folder) {
  fs.rmSync(folder, { recursive: true, force: true });
  fs.mkdirSync(folder, { recursive: true, mode: 0o700 });
  const lines = [];
  const wall = (t) => new Date(Date.UTC(2026, 11, 2, 10, 15, 0) + t * 1000).toISOString();
  const event = (t, kind, payload, by) =>
    lines.push(JSON.stringify({ type: 'event', wall: wall(t), seq: lines.length, kind, time_s: t, payload, ...(by ? { by } : {}) }));
  lines.push(JSON.stringify({ type: 'session', format: 'pitchwire.session.v1', started_wall: wall(0), source: 'synthetic test voice', hop_ms: 5.0, pid: 1 }));
  event(0.0, 'band_changed', { name: 'target', bands: [{ name: 'target', low_hz: 180.0, high_hz: 220.0 }] }, 'supervisor');
  const exercise = { preset: 'sustained_vowel', label: 'Vowel /a/ at G3', started_s: 0.5 };
  let voiced = 0;
  let frames = 0;
  let cycles = 0;
  let inside = 0;
  let marker = 0;
  let started = false;
  let ended = false;
  for (let k = 0; (k + 0.5) * HOP < 6.5; k += 1) {
    const t = (k + 0.5) * HOP;
    if (!started && t >= exercise.started_s) {
      event(exercise.started_s, 'exercise_started', exercise, 'supervisor');
      started = true;
    }
    if (marker < MARKERS.length && t >= MARKERS[marker].t) {
      const m = MARKERS[marker];
      const payload = { id: `m${marker + 1}`, label: m.label, sample: Math.round(m.t * 48000), wall: wall(m.t) };
      if (m.data) payload.data = m.data;
      event(m.t, 'marker', payload, 'lab');
      marker += 1;
    }
    if (!ended && t >= 4.0) {
      // The exercise's summary over its frames (docs/measures.md, "Exercise summary").
      const summary = {
        duration_s: 3.5, settled_s: +(frames * HOP).toFixed(3), voiced_s: +(voiced * HOP).toFixed(3),
        voiced_fraction: +(voiced / frames).toFixed(3), cycle_dose: +cycles.toFixed(1),
        f0_p5_hz: 196.0, f0_p50_hz: 196.0, f0_p95_hz: 247.0, f0_range_st: +(12 * Math.log2(247 / 196)).toFixed(3),
        f0_sd_st: 1.9, bands: [{ name: 'target', inside_fraction: +(inside / voiced).toFixed(3) }], measures: ['voiced_s'],
      };
      const payload = { ...exercise, summary };
      event(4.0, 'exercise_ended', payload, 'supervisor');
      fs.writeFileSync(path.join(folder, 'exercise-01-sustained_vowel.json'),
        `${JSON.stringify({ ...payload, ended_s: 4.0, ended_wall: wall(4.0), by: 'supervisor' }, null, 2)}\n`, { mode: 0o600 });
      ended = true;
    }
    const f = f0At(t);
    const fText = f === null ? 'null' : f.toFixed(3);
    lines.push(`{"type":"settled","index":${k},"time_s":${t.toFixed(4)},"f0_hz":${fText},"live_f0_hz":${fText},` +
      `"voicing":${f === null ? '0.1000' : '0.9500'},"confidence":${f === null ? '0.0000' : '0.9000'},"level_dbfs":-21.50}`);
    if (started && !ended) {
      frames += 1;
      if (f !== null) {
        voiced += 1;
        cycles += f * HOP;
        if (f >= 180 && f <= 220) inside += 1;
      }
    }
  }
  fs.writeFileSync(path.join(folder, 'session.jsonl'), `${lines.join('\n')}\n`, { mode: 0o600 });
}

// ---- pixels -----------------------------------------------------------------------------------------------

function rgbOf(hex) {
  const n = parseInt(hex.replace('#', ''), 16);
  return [(n >> 16) & 255, (n >> 8) & 255, n & 255];
}

class Pixels {
  constructor(width, height, data) {
    Object.assign(this, { width, height, data });
  }

  at(x, y) {
    const i = 4 * (y * this.width + x);
    return [this.data[i], this.data[i + 1], this.data[i + 2]];
  }

  near(x, y, rgb, tolerance) {
    if (x < 0 || y < 0 || x >= this.width || y >= this.height) return false;
    const p = this.at(x, y);
    return Math.max(Math.abs(p[0] - rgb[0]), Math.abs(p[1] - rgb[1]), Math.abs(p[2] - rgb[2])) <= tolerance;
  }
}

// Decodes a PNG with the browser itself: an <img> from a data URL drawn on a canvas.
async function decodePng(context, png) {
  const page = await context.newPage();
  const result = await page.evaluate(async (b64) => {
    const img = new Image();
    img.src = `data:image/png;base64,${b64}`;
    await img.decode();
    const canvas = document.createElement('canvas');
    canvas.width = img.naturalWidth;
    canvas.height = img.naturalHeight;
    const ctx = canvas.getContext('2d');
    ctx.drawImage(img, 0, 0);
    const data = ctx.getImageData(0, 0, canvas.width, canvas.height).data;
    let binary = '';
    for (let i = 0; i < data.length; i += 0x8000) binary += String.fromCharCode.apply(null, data.subarray(i, i + 0x8000));
    return { width: canvas.width, height: canvas.height, b64: btoa(binary) };
  }, png.toString('base64'));
  await page.close();
  return new Pixels(result.width, result.height, Buffer.from(result.b64, 'base64'));
}

// ---- 2 and 3 ----------------------------------------------------------------------------------------------

async function main() {
  const out = path.resolve(args.out);
  fs.mkdirSync(out, { recursive: true });
  const session = path.join(out, 'session');
  writeSession(session);
  const reportPath = path.join(out, 'report.html');
  fs.rmSync(reportPath, { force: true });
  execFileSync(args.pitchwire, ['report', session, '-o', reportPath], { stdio: 'inherit' });
  check('report written with mode 0600 (health data)', (fs.statSync(reportPath).mode & 0o777) === 0o600,
    (fs.statSync(reportPath).mode & 0o777).toString(8));

  const browser = await chromium.launch({
    executablePath: args.chromium,
    // As root in CI: no sandbox. No background traffic of Chromium's own (this machine has no network).
    args: ['--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking',
      '--disable-component-update', '--disable-sync', '--disable-default-apps'],
  });
  try {
    const context = await browser.newContext({ viewport: { width: 1200, height: 900 }, deviceScaleFactor: 1 });
    const reportUrl = pathToFileURL(reportPath).href;
    const requests = [];
    await context.route('**/*', (route) => {
      const url = route.request().url();
      if (url === reportUrl) return route.continue();
      requests.push(url);
      return route.abort();
    });
    context.on('request', (request) => {
      const url = request.url();
      if (url !== reportUrl && !url.startsWith('data:') && !requests.includes(url)) requests.push(url);
    });
    const page = await context.newPage();
    const consoleErrors = [];
    const dialogs = [];
    page.on('console', (msg) => { if (msg.type() === 'error') consoleErrors.push(msg.text()); });
    page.on('pageerror', (error) => consoleErrors.push(String(error)));
    page.on('dialog', async (dialog) => { dialogs.push(dialog.message()); await dialog.dismiss(); });
    await page.goto(reportUrl, { waitUntil: 'load' });

    // Text.
    const markerCell = await page.locator('#marker-table tr.marker td[data-field="label"]').first().textContent();
    check('hostile marker label is shown as text', markerCell === HOSTILE, JSON.stringify(markerCell));
    check('the marker label in the chart is text too', (await page.locator('#contour-chart g.marker text').first().textContent()).includes(HOSTILE));
    check('caution is visible', await page.locator('#caution').isVisible() &&
      (await page.locator('#caution').textContent()).includes('not a medical device'));
    check('band named in the legend', (await page.locator('#contour-legend').textContent()).includes('target band target'));
    check('exercise row from its file', (await page.locator('#exercise-table td[data-field="preset"]').first().textContent()) === 'sustained_vowel');

    // The chart's geometry.
    const svg = page.locator('#contour-chart');
    const numbers = async (name) => (await svg.getAttribute(name)).split(' ').map(Number);
    const [xa, xb] = await numbers('data-x');
    const [yc, yd] = await numbers('data-y');
    const [viewW] = await numbers('data-view');
    const [plotX0, plotY0, plotX1, plotY1] = await numbers('data-plot');
    const contourRgb = rgbOf(await page.locator('#contour-line').getAttribute('stroke'));
    const bandRgb = rgbOf(await page.locator('#bands g.band[data-band="target"]').getAttribute('data-fill-on-white'));
    const box = await svg.boundingBox();
    const scale = box.width / viewW;
    const shotPath = path.join(out, 'contour.png');
    const png = await svg.screenshot({ path: shotPath });
    await page.screenshot({ path: path.join(out, 'report-page.png'), fullPage: true });
    const pixels = await decodePng(context, png);
    check('screenshot is the chart', Math.abs(pixels.width - box.width) <= 1, `${pixels.width} px vs box ${box.width}`);

    const semitone = (f) => 69 + 12 * Math.log2(f / 440);
    const px = (t) => Math.round((xa + xb * t) * scale);
    const py = (f) => (yc + yd * semitone(f)) * scale;
    const top = Math.ceil(plotY0 * scale) + 2;
    const bottom = Math.floor(plotY1 * scale) - 2;
    const nearMarker = (t) => MARKERS.some((m) => Math.abs(px(m.t) - px(t)) <= 3);
    const CONTOUR_TOL = 40;

    // Rows of column x with the contour's colour.
    const contourRows = (x) => {
      const rows = [];
      for (let y = top; y <= bottom; y += 1) if (pixels.near(x, y, contourRgb, CONTOUR_TOL)) rows.push(y);
      return rows;
    };
    const steady = (name, t0, t1, f) => {
      let columns = 0;
      const bad = [];
      for (let t = t0; t <= t1 + 1e-9; t += 0.05) {
        if (nearMarker(t)) continue;
        columns += 1;
        const rows = contourRows(px(t));
        const y = py(f);
        const onLine = rows.some((r) => Math.abs(r - y) <= 2.5);
        const elsewhere = rows.filter((r) => Math.abs(r - y) > 4);
        if (!onLine || elsewhere.length) bad.push(`t=${t.toFixed(2)} rows ${rows.join(',')} expected ~${y.toFixed(1)}`);
      }
      check(name, columns > 10 && bad.length === 0, bad.slice(0, 3).join('; ') || `${columns} columns`);
    };
    steady('contour at y(196 Hz) during 0-2 s and nowhere else in those columns', 0.1, 1.9, 196.0);
    steady('contour at y(247 Hz) during 2.5-4.5 s and nowhere else in those columns', 2.6, 4.4, 247.0);

    // The gap: no contour colour at any height.
    {
      const hits = [];
      for (let x = px(2.04); x <= px(2.46); x += 1) {
        const rows = contourRows(x);
        if (rows.length) hits.push(`x=${x} rows ${rows.slice(0, 4).join(',')}`);
      }
      check('no contour within the unvoiced gap 2-2.5 s (no bridging line)', hits.length === 0 && px(2.46) - px(2.04) > 20,
        hits.slice(0, 3).join('; ') || `${px(2.46) - px(2.04) + 1} columns clear`);
    }

    // The glide: at its middle (5.25 s), F0 = 247 * (330/247)^0.5 = 285.5 Hz.
    {
      const f = GLIDE_FROM * (GLIDE_TO / GLIDE_FROM) ** 0.5;
      const rows = contourRows(px(5.25));
      check('glide at y(285.5 Hz) at 5.25 s', rows.some((r) => Math.abs(r - py(f)) <= 4), `rows ${rows.join(',')} expected ~${py(f).toFixed(1)}`);
    }

    // The band: its colour fills the 180-220 Hz rows and appears nowhere outside them (columns 2.6-4.4 s, where the
    // contour is above the band).
    {
      const bandTop = py(220);
      const bandBottom = py(180);
      let insideAll = 0;
      let insideBand = 0;
      let outsideBand = 0;
      let outsideAll = 0;
      for (let t = 2.6; t <= 4.4; t += 0.02) {
        if (nearMarker(t)) continue;
        const x = px(t);
        for (let y = top; y <= bottom; y += 1) {
          const isBand = pixels.near(x, y, bandRgb, 12);
          if (y > bandTop + 2 && y < bandBottom - 2) {
            insideAll += 1;
            if (isBand) insideBand += 1;
          } else if (y < bandTop - 2 || y > bandBottom + 2) {
            outsideAll += 1;
            if (isBand) outsideBand += 1;
          }
        }
      }
      check('band colour fills the 180-220 Hz rows', insideAll > 1000 && insideBand / insideAll >= 0.85,
        `${insideBand} of ${insideAll} pixels`);
      check('band colour appears nowhere outside 180-220 Hz', outsideAll > 1000 && outsideBand === 0,
        `${outsideBand} of ${outsideAll} pixels`);
      // The band is set at t = 0: the plot's left edge is shaded too.
      const x = Math.round(plotX0 * scale) + 2;
      check('band shaded from t = 0', pixels.near(x, Math.round((bandTop + bandBottom) / 2), bandRgb, 12) ||
        pixels.near(x + 4, Math.round((bandTop + bandBottom) / 2) + 3, bandRgb, 12));
      check('plot area inside the screenshot', Math.round(plotX1 * scale) <= pixels.width && bottom <= pixels.height);
    }

    check('no dialog (the hostile label did not run)', dialogs.length === 0, dialogs.join('; '));
    check('no console error', consoleErrors.length === 0, consoleErrors.slice(0, 3).join('; '));
    check('no network request (only the file itself)', requests.length === 0, requests.slice(0, 5).join(', '));
    console.log(`screenshot: ${shotPath}`);
    console.log(`page: ${path.join(out, 'report-page.png')}`);
  } finally {
    await browser.close();
  }
}

main()
  .catch((error) => {
    check('test ran to the end', false, error && error.stack ? error.stack : String(error));
  })
  .finally(() => {
    finish();
  });
