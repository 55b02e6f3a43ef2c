#!/usr/bin/env node
// The live page (clients/web) in headless Debian Chromium, driven by playwright-core (which downloads no
// browser), against a running pitchwired on the built-in demo voice.
//
// 1. Starts `pitchwired --input demo --port 0 --config FILE`, FILE putting tokens, log, session records and
//    the web root in a temporary folder (the web root: --web-root, the source's clients/web), and reads the
//    live and supervisor URLs it prints.
// 2. Opens the live page (observer) and the supervisor page, every request outside 127.0.0.1:PORT refused
//    and counted, and checks:
//    - the contour draws: the page's read-only hook (window.pitchwireView) counts voiced points drawn, and the
//      canvas's own pixels (getImageData) hold the contour colour; settled values replace live ones;
//    - gaps: the demo voice pauses, so the drawn series has at least one gap, and the canvas has a run of
//      columns without the contour colour between columns with it (the line does not bridge);
//    - the observer page has no controls at all (no form, no button), the supervisor page has them;
//    - a daemon error is shown next to the control that caused it (a band limit "H9": bad_note);
//    - a band set from the supervisor page appears on the observer page: its name and state in words, and its
//      fill colour in the canvas rows of its limits (and not outside them);
//    - an exercise started from the supervisor page appears on the observer page (running line, event, a
//      vertical line of the exercise colour in the canvas), a marker too, and its end;
//    - a reference pitch set from the supervisor page reaches the observer page;
//    - reconnection: the daemon is stopped with SIGTERM, the pages say "connection lost — retrying", a new
//      daemon starts on the same port (calibrated this time), the pages say they reconnected, keep their
//      roles, draw again and show the new daemon's state (no band, the reference it was configured with,
//      levels in dB SPL labelled as calibrated);
//    - no console error and no page error (the browser's own "WebSocket connection ... failed" lines while
//      the daemon is down are expected and only accepted then), no request or WebSocket elsewhere.
// 3. Keeps screenshots (observer, supervisor, observer after the reconnect) in --out and prints their paths.
// Prints PASS or FAIL per check and "N passed, N failed"; exit 1 on any failure.
//
// Usage: node live_view_test.js --daemon EXE --web-root DIR --modules DIR --chromium /usr/bin/chromium --out DIR
//   --modules: the folder where `npm ci` installed playwright-core (report.browser_setup).
'use strict';

const fs = require('node:fs');
const os = require('node:os');
const path = require('node:path');
const { spawn } = require('node:child_process');

const { check, finish, parseArgs, playwrightChromium } = require('../checks.js');

const args = parseArgs(process.argv, ['daemon', 'web-root', 'modules', 'chromium', 'out']);
const chromium = playwrightChromium(args.modules);


const sleep = (ms) => new Promise((resolve) => setTimeout(resolve, ms));
const started = Date.now();
const elapsed = () => `${((Date.now() - started) / 1000).toFixed(1)} s`;

// Polls fn (async) until it returns a truthy value or the time runs out; returns the last value.
async function until(fn, timeoutMs, everyMs = 100) {
  const end = Date.now() + timeoutMs;
  let value;
  for (;;) {
    value = await fn();
    if (value || Date.now() >= end) return value;
    await sleep(everyMs);
  }
}

// ---- the daemon -------------------------------------------------------------------------------------------

function startDaemon(config, port) {
  const proc = spawn(args.daemon, ['--input', 'demo', '--port', String(port), '--config', config],
    { stdio: ['ignore', 'pipe', 'pipe'] });
  let stderr = '';
  proc.stderr.on('data', (d) => { stderr = (stderr + d).slice(-4000); });
  return new Promise((resolve, reject) => {
    let text = '';
    const timer = setTimeout(() => {
      proc.kill('SIGKILL');
      reject(new Error(`pitchwired printed no URLs within 15 s; stderr: ${stderr}`));
    }, 15000);
    proc.on('exit', (code) => reject(new Error(`pitchwired exited with ${code}; stderr: ${stderr}`)));
    proc.stdout.on('data', (d) => {
      text += d;
      const live = /pitchwired: live page (http:\/\/127\.0\.0\.1:(\d+)\/\S*)\n/.exec(text);
      const sup = /pitchwired: supervisor page (http:\/\/127\.0\.0\.1:\d+\/\?token=[0-9a-f]+)\n/.exec(text);
      if (live && sup) {
        clearTimeout(timer);
        proc.removeAllListeners('exit');
        resolve({ proc, port: Number(live[2]), liveUrl: live[1], supervisorUrl: sup[1] });
      }
    });
  });
}

function stopDaemon(proc) {
  return new Promise((resolve) => {
    if (proc.exitCode !== null || proc.signalCode !== null) {
      resolve(proc.exitCode);
      return;
    }
    const timer = setTimeout(() => proc.kill('SIGKILL'), 10000);
    proc.once('exit', (code) => {
      clearTimeout(timer);
      resolve(code);
    });
    proc.kill('SIGTERM');
  });
}

// ---- pixels of the contour canvas --------------------------------------------------------------------------

// Reads the canvas in the page (device pixels) and measures, inside the plot, what the checks need:
// pixels and columns of the contour colour, the longest run of columns without it between columns with it,
// and, when asked, the share of a band's fill colour inside and outside its rows over the last columns.
async function canvasReport(page, band) {
  return page.evaluate((bandArg) => {
    const view = window.pitchwireView;
    const g = view.geometry();
    const pal = view.palette();
    const canvas = document.getElementById('contour');
    const ctx = canvas.getContext('2d');
    const { width, height } = canvas;
    const data = ctx.getImageData(0, 0, width, height).data;
    const rgb = (hex) => [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16));
    const near = (x, y, c, tol) => {
      const i = 4 * (y * width + x);
      return Math.abs(data[i] - c[0]) <= tol && Math.abs(data[i + 1] - c[1]) <= tol && Math.abs(data[i + 2] - c[2]) <= tol;
    };
    const d = g.dpr;
    const X0 = Math.ceil(g.x0 * d) + 2;
    const X1 = Math.floor(g.x1 * d) - 2;
    const Y0 = Math.ceil(g.y0 * d) + 2;
    const Y1 = Math.floor(g.y1 * d) - 2;
    const contour = rgb(pal.contour);
    let pixels = 0;
    const columns = [];
    for (let x = X0; x <= X1; x += 1) {
      let n = 0;
      for (let y = Y0; y <= Y1; y += 1) if (near(x, y, contour, 24)) n += 1;
      pixels += n;
      columns.push(n > 0);
    }
    const first = columns.indexOf(true);
    const last = columns.lastIndexOf(true);
    let longestGap = 0;
    let gapRuns = 0;
    let run = 0;
    for (let i = first; first >= 0 && i <= last; i += 1) {
      if (columns[i]) {
        if (run >= 3) gapRuns += 1;
        run = 0;
      } else {
        run += 1;
        longestGap = Math.max(longestGap, run);
      }
    }
    const out = { pixels, contourColumns: columns.filter(Boolean).length, longestGap, gapRuns, width, height };
    if (bandArg) {
      const st = (hz) => 12 * Math.log2(hz / g.refHz);
      const yOf = (hz) => (g.y1 - ((st(hz) - g.stLow) / (g.stHigh - g.stLow)) * (g.y1 - g.y0)) * d;
      const fill = rgb(pal.bandFill[view.bandSlot(bandArg.name) % pal.bandFill.length]);
      const top = yOf(bandArg.high_hz);
      const bottom = yOf(bandArg.low_hz);
      const fromX = Math.round(X1 - bandArg.share * (X1 - X0));
      let inAll = 0;
      let inFill = 0;
      let outAll = 0;
      let outFill = 0;
      for (let x = fromX; x <= X1; x += 1) {
        for (let y = Y0; y <= Y1; y += 1) {
          const isFill = near(x, y, fill, 6);
          if (y > top + 3 && y < bottom - 3) {
            inAll += 1;
            if (isFill) inFill += 1;
          } else if (y < top - 3 || y > bottom + 3) {
            outAll += 1;
            if (isFill) outFill += 1;
          }
        }
      }
      Object.assign(out, { bandTop: top, bandBottom: bottom, inAll, inFill, outAll, outFill });
    }
    return out;
  }, band || null);
}

// The vertical line of `kind` the last drawing placed (from the hook) and the share of the plot's height in
// its canvas column (or a neighbour) with `colourKey`'s colour; read in one task, so no drawing comes between.
async function verticalLine(page, kind, colourKey) {
  return page.evaluate(({ kind: k, colourKey: key }) => {
    const view = window.pitchwireView;
    const v = view.stats().verticals.find((x) => x.kind === k);
    if (!v) return null;
    const g = view.geometry();
    const hex = view.palette()[key];
    const c = [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16));
    const canvas = document.getElementById('contour');
    const d = g.dpr;
    const x = Math.floor(v.x * d);
    const y0 = Math.ceil(g.y0 * d) + 2;
    const y1 = Math.floor(g.y1 * d) - 2;
    let share = 0;
    for (const dx of [-1, 0, 1]) {
      const col = canvas.getContext('2d').getImageData(x + dx, y0, 1, y1 - y0 + 1).data;
      let n = 0;
      for (let i = 0; i < col.length; i += 4) {
        if (Math.abs(col[i] - c[0]) <= 40 && Math.abs(col[i + 1] - c[1]) <= 40 && Math.abs(col[i + 2] - c[2]) <= 40) n += 1;
      }
      share = Math.max(share, n / (y1 - y0 + 1));
    }
    return { ...v, share };
  }, { kind, colourKey });
}

const viewStats = (page) => page.evaluate(() => window.pitchwireView.stats());
const text = async (page, selector) => ((await page.locator(selector).first().textContent()) || '').replace(/\s+/g, ' ').trim();

// ---- the test ---------------------------------------------------------------------------------------------

async function main() {
  const out = path.resolve(args.out);
  fs.mkdirSync(out, { recursive: true });
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'pitchwire-web-'));
  const config = path.join(tmp, 'pitchwired.jsonc');
  const settings = {
    token_dir: path.join(tmp, 'tokens'), log_file: path.join(tmp, 'pitchwired.log'),
    session_dir: path.join(tmp, 'sessions'), web_root: path.resolve(args['web-root']),
  };
  fs.writeFileSync(config, JSON.stringify(settings));
  // The restarted daemon is calibrated (dB SPL = dBFS + 100, docs/measures.md "Level"): the page must take
  // that from the new hello.
  const calibratedConfig = path.join(tmp, 'pitchwired-calibrated.jsonc');
  fs.writeFileSync(calibratedConfig, JSON.stringify({ ...settings, spl_offset_db: 100 }));
  let daemon = await startDaemon(config, 0);
  const { port } = daemon;
  const origin = `http://127.0.0.1:${port}`;
  console.log(`pitchwired on port ${port} (${elapsed()})`);

  const browser = await chromium.launch({
    executablePath: args.chromium,
    // As root in CI: no sandbox. No background traffic of Chromium's own (this machine has no network).
    args: ['--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking',
      '--disable-component-update', '--disable-sync', '--disable-default-apps'],
  });
  const shots = [];
  try {
    // One browser context (a window of its own) per page: the observer's screen and the supervisor's.
    const foreign = [];
    const newPage = async () => {
      const context = await browser.newContext({ viewport: { width: 1280, height: 1000 }, deviceScaleFactor: 1 });
      await context.route('**/*', (route) => {
        const url = route.request().url();
        if (url.startsWith(`${origin}/`)) return route.continue();
        foreign.push(url);
        return route.abort();
      });
      context.on('request', (request) => {
        const url = request.url();
        if (!url.startsWith(`${origin}/`) && !foreign.includes(url)) foreign.push(url);
      });
      return context.newPage();
    };
    let outage = false;
    const consoleErrors = [];
    const toleratedDuringOutage = [];
    const wsFailure = new RegExp(`^WebSocket connection to 'ws://127\\.0\\.0\\.1:${port}/ws(\\?token=[0-9a-f]+)?' failed`);
    const watch = (page, name) => {
      page.on('console', (msg) => {
        if (msg.type() !== 'error') return;
        if (outage && wsFailure.test(msg.text())) toleratedDuringOutage.push(msg.text());
        else consoleErrors.push(`${name}: ${msg.text()}`);
      });
      page.on('pageerror', (error) => consoleErrors.push(`${name}: ${String(error)}`));
      page.on('websocket', (ws) => {
        if (!ws.url().startsWith(`ws://127.0.0.1:${port}/ws`)) foreign.push(ws.url());
      });
    };

    // ---- connect ----
    const observer = await newPage();
    watch(observer, 'observer');
    await observer.goto(daemon.liveUrl, { waitUntil: 'load' });
    const supervisor = await newPage();
    watch(supervisor, 'supervisor');
    await supervisor.goto(daemon.supervisorUrl, { waitUntil: 'load' });
    check('observer page connects as observer',
      await until(async () => (await text(observer, '#conn')).includes('connected as observer'), 10000),
      await text(observer, '#conn'));
    check('supervisor page (?token=) connects as supervisor',
      await until(async () => (await text(supervisor, '#conn')).includes('connected as supervisor'), 10000),
      await text(supervisor, '#conn'));
    check('the role is shown in words', (await text(observer, '#role')) === 'observer view'
      && (await text(supervisor, '#role')) === 'supervisor view');

    // ---- the contour and its gaps ----
    const drawn = await until(async () => {
      const s = await viewStats(observer);
      return s.voicedPoints >= 150 && s.gaps >= 1 ? s : null;
    }, 15000, 250) || await viewStats(observer);
    check('the contour draws voiced points from live frames', drawn.voicedPoints >= 150,
      `${drawn.voicedPoints} voiced points, ${drawn.frames} frames (${elapsed()})`);
    check('unvoiced stretches of the demo voice are gaps in the drawn series', drawn.gaps >= 1 && drawn.unvoiced > 0,
      `${drawn.gaps} gaps, ${drawn.runs} runs, ${drawn.unvoiced} unvoiced frames`);
    check('settled values replaced live ones', drawn.settledApplied > 50, `${drawn.settledApplied} settled, ` +
      `${drawn.settledChanged} changed the value`);
    check('frames are kept for the longest window only (bounded)', drawn.frames <= drawn.capacity
      && drawn.capacity <= 30 * (1000 / (5 * drawn.step)) + 64, `${drawn.frames} of ${drawn.capacity}`);
    const pix = await canvasReport(observer);
    check('the canvas holds the contour colour', pix.pixels > 300 && pix.contourColumns > 100,
      `${pix.pixels} pixels in ${pix.contourColumns} columns`);
    check('the canvas line breaks: columns without the contour between columns with it', pix.gapRuns >= 1
      && pix.longestGap >= 3, `${pix.gapRuns} breaks, longest ${pix.longestGap} columns`);
    const note = await text(observer, '#note');
    const hz = await text(observer, '#hz');
    check('the large readout shows a note with cents and Hz, or says unvoiced',
      (/^[A-G]#?-?\d [+\u2212\u00b1]\d+ ct$/.test(note) && /^\d+\.\d Hz$/.test(hz)) || (note === '\u2014' && hz === 'unvoiced'),
      `${note} / ${hz}`);
    check('the level is shown in dBFS (not calibrated)', (await text(observer, '#level-unit')) === 'dBFS'
      && /^(-?\d+\.\d|silence)$/.test(await text(observer, '#level-value')), await text(observer, '#level-value'));
    check('statistics arrive (voiced share, session voiced time)', await until(async () =>
      /^\d+ %$/.test(await text(observer, '#s-voiced')) && /s$|^\d+:\d\d$/.test(await text(observer, '#s-dose-time')), 3000),
      `${await text(observer, '#s-voiced')}, ${await text(observer, '#s-dose-time')}`);
    check('the cautions are in the footer', (await text(observer, '#caution')).includes('not a medical device')
      && (await text(observer, '#caution')).includes('Stop on pain, strain or hoarseness')
      && (await text(observer, '#caution')).includes('health data'));

    // ---- controls only for the supervisor ----
    const observerControls = await observer.evaluate(() => ({
      forms: document.querySelectorAll('form').length,
      buttons: document.querySelectorAll('button').length,
      setBand: document.getElementById('set-band-form') !== null,
      inputs: [...document.querySelectorAll('input, select')].map((e) => e.id).sort().join(','),
    }));
    check('the observer page has no controls (no form, no button; only the window and list filters)',
      observerControls.forms === 0 && observerControls.buttons === 0 && !observerControls.setBand
      && observerControls.inputs === 'show-crossings,window-s', JSON.stringify(observerControls));
    check('the supervisor page has its controls', await supervisor.locator('#set-band-form').isVisible()
      && await supervisor.locator('#exercise-form').isVisible() && await supervisor.locator('#reference-form').isVisible());

    // ---- a daemon error beside its control ----
    await supervisor.fill('#band-name', 'web_band');
    await supervisor.fill('#band-low', 'H9');
    await supervisor.fill('#band-high', 'B3');
    await supervisor.click('#set-band-form button[type="submit"]');
    const badNote = await until(async () => {
      const t = await text(supervisor, '#set-band-answer');
      return t.includes('bad_note') ? t : null;
    }, 5000);
    check('the daemon\'s error is shown next to the control (bad_note for "H9")', Boolean(badNote), badNote || await text(supervisor, '#set-band-answer'));

    // ---- a band from the supervisor, seen by the observer ----
    await supervisor.fill('#band-low', 'G3');
    check('the supervisor sees what a limit stands for before sending', (await text(supervisor, '#band-low-hz')).includes('196.0 Hz'),
      await text(supervisor, '#band-low-hz'));
    await supervisor.focus('#band-high');
    await supervisor.keyboard.press('Enter');  // the keyboard submits the form
    check('the band is set (ack shown)', await until(async () => (await text(supervisor, '#set-band-answer')).includes('band web_band set'), 5000),
      await text(supervisor, '#set-band-answer'));
    const bandItem = observer.locator('#band-states li[data-band="web_band"]');
    check('the band\'s name and limits appear on the observer page', await until(async () => await bandItem.count() === 1, 5000)
      && (await text(observer, '#band-states li[data-band="web_band"]')).includes('web_band 196.0\u2013246.9 Hz'),
      await text(observer, '#band-states'));
    // The state and the text read together (the state may change between two reads).
    const item = await until(async () => {
      const got = await observer.evaluate(() => {
        const li = document.querySelector('#band-states li[data-band="web_band"]');
        return li && { state: li.dataset.state, text: li.textContent.replace(/\s+/g, ' ').trim() };
      });
      return got && got.state !== 'unknown' ? got : null;
    }, 5000) || {};
    const signs = { below: '\u25bc', inside: '\u25cf', above: '\u25b2', unvoiced: '\u25cb' };
    check('the band\'s state is said in words (below / inside / above / unvoiced) with its sign',
      Boolean(signs[item.state]) && item.text.endsWith(`${signs[item.state]} ${item.state}`), JSON.stringify(item));
    await sleep(2500);
    const band = await canvasReport(observer, { name: 'web_band', low_hz: 195.998, high_hz: 246.942, share: 0.15 });
    check('the band\'s fill is drawn in its rows on the observer\'s canvas',
      band.inAll > 1000 && band.inFill / band.inAll >= 0.6, `${band.inFill} of ${band.inAll} pixels`);
    check('... and nowhere outside its rows', band.outAll > 1000 && band.outFill === 0, `${band.outFill} of ${band.outAll} pixels`);
    check('the observer\'s drawing holds the band', (await viewStats(observer)).bandsDrawn.includes('web_band'));

    // ---- an exercise and a marker from the supervisor, seen by the observer ----
    await supervisor.selectOption('#exercise-preset', 'sustained_vowel');
    await supervisor.fill('#exercise-label', 'web check vowel');
    await supervisor.click('#start-exercise');
    check('the exercise starts (ack shown)', await until(async () => (await text(supervisor, '#exercise-answer')).includes('started'), 5000),
      await text(supervisor, '#exercise-answer'));
    check('the observer page says the exercise is running, with its label and preset',
      await until(async () => {
        const t = await text(observer, '#exercise-now');
        return t.includes('Exercise running') && t.includes('web check vowel') && t.includes('sustained_vowel');
      }, 5000), await text(observer, '#exercise-now'));
    check('the observer\'s event list has the start', await until(async () =>
      (await text(observer, '#events')).includes('exercise started'), 3000));
    await supervisor.fill('#mark-label', 'web marker one');
    await supervisor.click('#mark-form button[type="submit"]');
    check('the marker reaches the observer\'s event list', await until(async () =>
      (await text(observer, '#events li.kind-marker')).includes('web marker one'), 5000));
    await sleep(300);
    const start = await verticalLine(observer, 'exercise_start', 'exercise');
    check('the exercise start is a vertical line of the exercise colour on the observer\'s canvas',
      start && start.share >= 0.6, JSON.stringify(start));
    const marker = await verticalLine(observer, 'marker', 'marker');
    check('the marker is a dashed vertical line on the observer\'s canvas', marker && marker.share >= 0.3
      && marker.share < 0.9, JSON.stringify(marker));
    shots.push(path.join(out, 'live-observer.png'), path.join(out, 'live-supervisor.png'));
    await observer.screenshot({ path: shots[0], fullPage: true });
    await supervisor.screenshot({ path: shots[1], fullPage: true });
    await supervisor.click('#end-exercise');
    check('the exercise ends and the observer page says so', await until(async () =>
      (await text(observer, '#exercise-now')).includes('No exercise running')
      && (await text(observer, '#events')).includes('exercise ended'), 5000), await text(observer, '#exercise-now'));
    await supervisor.fill('#reference-value', 'G3');
    await supervisor.click('#reference-form button[type="submit"]');
    check('a reference pitch from the supervisor reaches the observer (G3, 196 Hz)', await until(async () =>
      Math.abs((await viewStats(observer)).refHz - 195.998) < 0.01, 5000), String((await viewStats(observer)).refHz));

    // ---- the daemon goes away and comes back on the same port ----
    outage = true;
    const code = await stopDaemon(daemon.proc);
    check('the daemon stops on SIGTERM', code === 0, `exit ${code}`);
    const lostText = await until(async () => {
      const t = await text(observer, '#conn');
      return t.includes('connection lost \u2014 retrying') ? t : null;
    }, 5000);
    check('the observer page says the connection was lost and that it retries', Boolean(lostText), lostText || await text(observer, '#conn'));
    check('the supervisor page says so too', await until(async () =>
      (await text(supervisor, '#conn')).includes('connection lost \u2014 retrying'), 5000));
    check('the readout no longer claims a live value', (await text(observer, '#hz')) === 'no connection');
    await sleep(1200);  // at least one refused attempt
    daemon = await startDaemon(calibratedConfig, port);
    check('a new daemon runs on the same port', daemon.port === port, String(daemon.port));
    check('the observer page says it reconnected', await until(async () =>
      (await text(observer, '#conn')).includes('reconnected'), 10000), await text(observer, '#conn'));
    check('the supervisor page reconnects as supervisor, controls in place', await until(async () =>
      (await text(supervisor, '#conn')).includes('reconnected'), 10000)
      && (await viewStats(supervisor)).role === 'supervisor' && await supervisor.locator('#set-band-form').isVisible());
    outage = false;
    const again = await until(async () => {
      const s = await viewStats(observer);
      return s.voicedPoints >= 40 ? s : null;
    }, 10000, 250) || await viewStats(observer);
    check('the observer page draws again after the reconnect', again.voicedPoints >= 40 && again.reconnects === 1,
      `${again.voicedPoints} voiced points, reconnects ${again.reconnects}`);
    const readLevel = () => observer.evaluate(() => ({
      unit: document.getElementById('level-unit').textContent,
      value: document.getElementById('level-value').textContent,
      dbfs: document.getElementById('level-meter').getAttribute('aria-valuetext'),
    }));
    const level = await until(async () => {
      const l = await readLevel();
      return /^-?\d+\.\d$/.test(l.value) ? l : null;  // not "silence"
    }, 3000) || await readLevel();
    const dbfsNow = Number((/^(-?\d+\.\d) dBFS/.exec(level.dbfs) || [])[1]);
    check('the new hello\'s calibration is used: level in "dB SPL (calibrated)", dBFS + 100',
      level.unit === 'dB SPL (calibrated)' && Number.isFinite(dbfsNow)
      && Math.abs(Number(level.value) - (dbfsNow + 100)) < 0.11, JSON.stringify(level));
    check('... and the mean level too', await until(async () => (await text(observer, '#s-level')).includes('dB SPL (calibrated)'), 3000),
      await text(observer, '#s-level'));
    const pixAgain = await canvasReport(observer);
    check('... in the canvas too', pixAgain.pixels > 100, `${pixAgain.pixels} pixels`);
    check('the page shows the new daemon\'s state: no band, the configured reference',
      (await text(observer, '#band-states')) === 'no band set' && again.refHz === 100, `${await text(observer, '#band-states')}, ${again.refHz}`);
    shots.push(path.join(out, 'live-observer-reconnected.png'));
    await observer.screenshot({ path: shots[2], fullPage: true });

    check('no console error and no page error', consoleErrors.length === 0, consoleErrors.slice(0, 5).join(' | '));
    check('no request or WebSocket outside 127.0.0.1:PORT', foreign.length === 0, foreign.slice(0, 5).join(', '));
    console.log(`(${toleratedDuringOutage.length} refused WebSocket attempts logged by the browser while the daemon was down)`);
  } finally {
    await browser.close();
    await stopDaemon(daemon.proc);
    fs.rmSync(tmp, { recursive: true, force: true });
  }
  for (const shot of shots) console.log(`screenshot: ${shot}`);
  console.log(`took ${elapsed()}`);
}

main()
  .catch((error) => {
    check('test ran to the end', false, error && error.stack ? error.stack : String(error));
  })
  .finally(() => {
    finish();
  });
