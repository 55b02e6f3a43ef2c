// live.js: the live page's connection to pitchwired (protocol v1, docs/protocol.md), its panels and the
// supervisor's controls.
//
// - Connects to /ws with the subprotocol pitchwire.v1, passing on the page's own ?token= (the supervisor URL
//   the daemon prints), and subscribes to the frame fields it shows (f0_hz, level_dbfs) at about 50 frames
//   per second with the settled corrections. When the socket closes it says so, retries with a growing
//   delay, and on the next hello starts again from what that hello says (role, reference, bands, exercise).
// - Frames go into a FrameStore (contour.js) holding the longest window the page offers; the canvas and the
//   large readout are redrawn from requestAnimationFrame when something changed.
// - Controls exist only on a supervisor's page (and, of them, the marker on a lab client's page): they are
//   cloned from a <template> after hello says the role, and every request's answer (ack or error) is shown
//   beside the control that sent it.
// - window.pitchwireView: a small read-only hook (counts of what was drawn, the canvas geometry, the palette)
//   for tests/clients/web/live_view_test.js.
// Text from the daemon (labels, names, messages) is only ever set as textContent.
'use strict';
(function () {
  const P = window.PitchwirePitch;
  const { FrameStore, ContourView, PALETTE } = window.PitchwireContour;
  const $ = (id) => document.getElementById(id);

  const MAX_WINDOW_S = 30;         // the longest window offered: the frames kept
  const EVENT_LIMIT = 60;          // entries in the event list
  const VERTICAL_LIMIT = 200;      // markers and exercise lines kept
  const BAND_HISTORY_LIMIT = 64;   // band spans kept for drawing
  const BACKOFF_MS = [500, 1000, 2000, 4000];
  const SUBSCRIBE = { type: 'subscribe', id: 'live', rate: { fps: 60 }, fields: ['f0_hz', 'level_dbfs'], settled: true };
  const READOUT_MS = 100;          // the large readout changes at most ten times a second
  const METER_FLOOR_DBFS = -80;
  const STATE_WORDS = {
    below: { sign: '\u25bc', word: 'below' },
    inside: { sign: '\u25cf', word: 'inside' },
    above: { sign: '\u25b2', word: 'above' },
    unvoiced: { sign: '\u25cb', word: 'unvoiced' },
    unknown: { sign: '\u25cc', word: 'no reading yet' },
  };

  const token = new URLSearchParams(location.search).get('token');
  const store = new FrameStore(MAX_WINDOW_S * 50 + 64);
  const view = new ContourView($('contour'));
  const state = {
    ws: null, connected: false, everConnected: false, attempts: 0, retryTimer: null,
    role: null, refHz: 100, hopMs: 5, step: 4, f0Range: { min: 50, max: 1400 }, splOffset: null, limits: null,
    bands: [], bandSlots: new Map(), bandHistory: [], bandStates: new Map(), exercise: null, verticals: [],
    latest: null, stats: null, windowS: 10, pending: new Map(), nextId: 1, presets: [], presetLabels: new Map(),
    reconnects: 0, drawPending: false, lastReadout: 0, readoutTimer: null, draws: 0,
  };

  // ---- text helpers -------------------------------------------------------------------------------------

  const clock = () => new Date().toTimeString().slice(0, 8);
  const pct = (x) => `${Math.round(100 * x)} %`;
  const limitsText = (b) => `${b.low_hz.toFixed(1)}\u2013${b.high_hz.toFixed(1)} Hz`;
  const exerciseName = (p) => (p.label ? `${p.label} (${p.preset})` : p.preset);
  const el = (tag, className, text) => {
    const e = document.createElement(tag);
    if (className) e.className = className;
    if (text !== undefined) e.textContent = text;
    return e;
  };

  function setConn(kind, sign, text) {
    const conn = $('conn');
    conn.className = `conn conn-${kind}`;
    $('conn-sign').textContent = sign;
    $('conn-text').textContent = text;
  }

  // ---- connection ---------------------------------------------------------------------------------------

  function connect() {
    clearTimeout(state.retryTimer);
    const scheme = location.protocol === 'https:' ? 'wss' : 'ws';
    const url = `${scheme}://${location.host}/ws${token ? `?token=${encodeURIComponent(token)}` : ''}`;
    let ws;
    try {
      ws = new WebSocket(url, 'pitchwire.v1');
    } catch (error) {
      lost();
      return;
    }
    state.ws = ws;
    ws.onopen = () => ws.send(JSON.stringify(SUBSCRIBE));
    ws.onmessage = (e) => {
      if (state.ws !== ws) return;
      let m;
      try {
        m = JSON.parse(e.data);
      } catch (error) {
        return;  // not ours to judge: the daemon sends JSON
      }
      handle(m);
    };
    ws.onclose = () => {
      if (state.ws !== ws) return;
      state.ws = null;
      lost();
    };
  }

  function lost() {
    const wasConnected = state.connected;
    state.connected = false;
    for (const [, p] of state.pending) answer(p.out, 'error', 'no answer: the connection was lost');
    state.pending.clear();
    const delay = BACKOFF_MS[Math.min(state.attempts, BACKOFF_MS.length - 1)];
    state.attempts += 1;
    // Said once per attempt (no countdown: the status is a live region, read out on each change).
    const head = state.everConnected ? 'connection lost \u2014 retrying' : 'cannot reach pitchwired \u2014 retrying';
    setConn('lost', '\u2715', `${head} (attempt ${state.attempts}, next in ${(delay / 1000).toFixed(1)} s)`);
    state.retryTimer = setTimeout(connect, delay);
    if (wasConnected) addEvent(null, 'connection', `lost at ${clock()}`, 'local');
    updateReadout(true);
    requestDraw();
  }

  // ---- messages -----------------------------------------------------------------------------------------

  function handle(m) {
    switch (m.type) {
      case 'hello': onHello(m); break;
      case 'frame': onFrame(m); break;
      case 'settled':
        if (store.settle(m.index, m.f0_hz)) requestDraw();
        break;
      case 'stats': onStats(m); break;
      case 'event': onEvent(m); break;
      case 'ack': onAck(m); break;
      case 'error': onError(m); break;
      default: break;  // pong, and types of later versions
    }
  }

  function onHello(m) {
    const again = state.everConnected;
    state.everConnected = true;
    state.connected = true;
    state.attempts = 0;
    if (again) state.reconnects += 1;
    state.refHz = m.reference_hz;
    state.hopMs = m.hop_ms;
    state.f0Range = m.f0_range_hz;
    state.splOffset = m.spl_offset_db;
    // The daemon's presets (hello.presets), with their labels.
    state.presets = (m.presets || []).map((p) => p.name);
    state.presetLabels = new Map((m.presets || []).map((p) => [p.name, p.label]));
    renderPresets();
    state.limits = m.limits;
    // Everything drawn is from the new stream (after a daemon restart its clock starts again at 0).
    store.clear();
    state.latest = null;
    state.stats = null;
    state.verticals = [];
    state.bandHistory = [];
    state.bandStates.clear();
    $('alerts').replaceChildren();
    applyBands(m.bands, -Infinity);
    state.exercise = m.exercise;
    if (m.exercise) addVertical('exercise_start', m.exercise.started_s, m.exercise.label || m.exercise.preset);
    if (state.role !== m.role) {
      state.role = m.role;
      renderControls();
    }
    $('role').textContent = `${m.role} view`;
    $('role').dataset.role = m.role;
    setConn('ok', '\u25cf', again ? `reconnected at ${clock()} \u2014 drawing the new stream` : `connected as ${m.role}`);
    addEvent(null, 'connection', `${again ? 'reconnected' : 'connected'} at ${clock()}: pitchwired ${m.server_version}, ` +
      `${m.role}, reference ${P.formatHz(m.reference_hz)}`, 'local');
    renderLevelUnit();
    renderExercise();
    renderStats();
    renderReference();
    updateReadout(true);
    requestDraw();
  }

  function onFrame(m) {
    const f0 = m.f0_hz === undefined ? null : m.f0_hz;
    if (!store.push(m.index, m.time_s, f0, m.level_dbfs)) {
      store.clear();  // the stream started again without a new connection
      store.push(m.index, m.time_s, f0, m.level_dbfs);
    }
    state.latest = m;
    requestDraw();
  }

  function onStats(m) {
    state.stats = m;
    for (const b of m.bands || []) state.bandStates.set(b.name, b.state);
    renderStats();
    renderBands();
  }

  function onAck(m) {
    if (m.id === SUBSCRIBE.id) {
      state.step = (m.result && m.result.every) || 1;
      // Frames per second of this subscription, for the longest window.
      const capacity = Math.ceil(MAX_WINDOW_S * (1000 / (state.hopMs * state.step))) + 64;
      if (capacity !== store.capacity) store.resize(capacity);
      return;
    }
    const p = state.pending.get(m.id);
    if (!p) return;
    state.pending.delete(m.id);
    answer(p.out, 'ok', p.done(m));
  }

  function onError(m) {
    const p = m.id ? state.pending.get(m.id) : null;
    if (p) {
      state.pending.delete(m.id);
      answer(p.out, 'error', `${m.code}: ${m.message}`);
      if (m.code === 'unknown_preset') learnPresets(m.message);
      return;
    }
    addEvent(null, 'error', `${m.code}: ${m.message}`, 'local');
  }

  function onEvent(m) {
    const p = m.payload || {};
    switch (m.kind) {
      case 'band_changed':
        applyBands(p.bands || [], m.time_s);
        break;
      case 'band_crossing':
        state.bandStates.set(p.name, p.to);
        renderBands();
        break;
      case 'exercise_started':
        state.exercise = { preset: p.preset, label: p.label, started_s: p.started_s };
        addVertical('exercise_start', p.started_s, p.label || p.preset);
        renderExercise();
        break;
      case 'exercise_ended':
        state.exercise = null;
        addVertical('exercise_end', m.time_s, `end ${p.label || p.preset}`);
        renderExercise();
        break;
      case 'marker':
        addVertical('marker', m.time_s, p.label);
        break;
      case 'reference_changed':
        state.refHz = p.reference_hz;
        renderReference();
        break;
      case 'dose_limit':
        alertOn(`dose-${p.measure}`, 'Dose limit passed', eventText(m)[1]);
        break;
      case 'recording_problem':
        if (p.resolved) alertOff('recording');
        else alertOn('recording', 'Session record not written', p.message);
        break;
      case 'device_lost':
        alertOn('device', 'Input lost', `${p.device}: ${p.reason}`);
        break;
      case 'device_back':
        alertOff('device');
        break;
      default:
        break;
    }
    const [what, text] = eventText(m);
    addEvent(m.time_s, what, text + (m.by ? ` (by ${m.by})` : ''), m.kind);
    requestDraw();
  }

  function eventText(m) {
    const p = m.payload || {};
    const s = p.summary || {};
    switch (m.kind) {
      case 'overflow': return ['input overflow', `${P.formatCount(p.samples_lost)} samples lost`];
      case 'device_lost': return ['input lost', `${p.device}: ${p.reason}`];
      case 'device_back': return ['input back', p.device];
      case 'band_changed': {
        const b = (p.bands || []).find((x) => x.name === p.name);
        return b ? ['band set', `${b.name} ${limitsText(b)}`] : ['band cleared', p.name];
      }
      case 'band_crossing':
        return ['band crossing', `${p.name}: ${p.from} \u2192 ${p.to} (since ${p.since_s.toFixed(2)} s)`];
      case 'exercise_started': return ['exercise started', exerciseName(p)];
      case 'exercise_ended': {
        const parts = [`${exerciseName(p)}: ${P.formatDuration(s.duration_s)}`];
        if (s.voiced_fraction !== null && s.voiced_fraction !== undefined) parts.push(`voiced ${pct(s.voiced_fraction)}`);
        if (s.f0_p50_hz) parts.push(`median ${P.formatHz(s.f0_p50_hz)}`);
        if (s.f0_range_st !== null && s.f0_range_st !== undefined) parts.push(`p5\u2013p95 ${s.f0_range_st.toFixed(1)} st`);
        return ['exercise ended', parts.join(', ')];
      }
      case 'marker': return ['marker', p.label];
      case 'dropped_frames': return ['frames dropped', `${p.count} frames did not reach this page`];
      case 'reference_changed':
        return ['reference pitch', `${P.formatHz(p.reference_hz)} (${P.formatNote(p.reference_hz)})`];
      case 'dose_limit':
        return ['dose limit', p.measure === 'voiced_s'
          ? `voiced time ${P.formatDuration(p.value)} passed the limit of ${P.formatDuration(p.limit)}`
          : `cycle dose ${P.formatCount(p.value)} passed the limit of ${P.formatCount(p.limit)}`];
      case 'recording_problem':
        return ['session record', `${p.resolved ? 'written again' : 'not written'}: ${p.message}`];
      default: return [m.kind, JSON.stringify(p).slice(0, 200)];
    }
  }

  // ---- state kept for drawing ---------------------------------------------------------------------------

  function slotOf(name) {
    if (!state.bandSlots.has(name)) {
      if (state.bandSlots.size >= 64) state.bandSlots.clear();
      state.bandSlots.set(name, state.bandSlots.size);
    }
    return state.bandSlots.get(name);
  }

  // The bands after a change at audio time t: spans that ended close at t, new or moved bands open at t.
  function applyBands(list, t) {
    for (const h of state.bandHistory) {
      if (h.to !== null) continue;
      const now = list.find((b) => b.name === h.name);
      if (!now || now.low_hz !== h.low_hz || now.high_hz !== h.high_hz) h.to = t;
    }
    for (const b of list) {
      if (!state.bandHistory.some((h) => h.to === null && h.name === b.name)) {
        state.bandHistory.push({ name: b.name, low_hz: b.low_hz, high_hz: b.high_hz, from: t, to: null, slot: slotOf(b.name) });
      }
    }
    for (const name of [...state.bandStates.keys()]) if (!list.some((b) => b.name === name)) state.bandStates.delete(name);
    state.bands = list.map((b) => ({ name: b.name, low_hz: b.low_hz, high_hz: b.high_hz }));
    prune();
    renderBands();
    renderClearChoices();
    requestDraw();
  }

  function addVertical(kind, t, label) {
    state.verticals.push({ kind, t, label: String(label || '') });
    prune();
  }

  // Keeps only what the longest window can show.
  function prune() {
    const newest = store.newestTime;
    const oldest = Number.isFinite(newest) ? newest - MAX_WINDOW_S - 1 : -Infinity;
    state.verticals = state.verticals.filter((v) => v.t >= oldest).slice(-VERTICAL_LIMIT);
    state.bandHistory = state.bandHistory.filter((h) => h.to === null || h.to >= oldest).slice(-BAND_HISTORY_LIMIT);
  }

  // ---- drawing ------------------------------------------------------------------------------------------

  function requestDraw() {
    if (state.drawPending) return;
    state.drawPending = true;
    requestAnimationFrame(draw);
  }

  function draw(now) {
    state.drawPending = false;
    if (state.verticals.length || state.bandHistory.some((h) => h.to !== null)) prune();
    view.draw({
      store, step: state.step, t1: store.newestTime, windowS: state.windowS, refHz: state.refHz,
      f0Range: state.f0Range, bands: state.bandHistory, verticals: state.verticals, stale: !state.connected,
    });
    state.draws += 1;
    if (now - state.lastReadout >= READOUT_MS) updateReadout(false);
    else if (!state.readoutTimer) {
      state.readoutTimer = setTimeout(() => {
        state.readoutTimer = null;
        updateReadout(false);
      }, READOUT_MS);
    }
  }

  // The large note, Hz and semitones, the level and the exercise clock.
  function updateReadout(force) {
    const now = performance.now();
    if (!force && now - state.lastReadout < READOUT_MS) return;
    state.lastReadout = now;
    const m = state.latest;
    const note = $('note');
    if (!state.connected || !m) {
      note.textContent = '\u2013';
      note.className = 'note note-none';
      $('hz').textContent = state.connected ? 'waiting for the voice' : 'no connection';
      $('st').textContent = '';
      setLevel(null);
      return;
    }
    if (m.f0_hz === null || m.f0_hz === undefined) {
      note.textContent = '\u2014';
      note.className = 'note note-unvoiced';
      $('hz').textContent = 'unvoiced';
      $('st').textContent = '';
    } else {
      // "G3 +12 ct": the name large, the cents beside it.
      const [name, cents] = P.formatNote(m.f0_hz).split(/ (.*)/);
      note.replaceChildren(el('span', 'note-name', name), document.createTextNode(' '), el('span', 'note-cents', cents));
      note.className = 'note';
      $('hz').textContent = P.formatHz(m.f0_hz);
      $('st').textContent = `${P.signed(P.semitones(m.f0_hz, state.refHz), 1)} st re ${P.formatHz(state.refHz)}`;
    }
    setLevel(m.level_dbfs);
    if (state.exercise) renderExercise();
  }

  function setLevel(dbfs) {
    const fill = $('level-fill');
    const meter = $('level-meter');
    if (dbfs === null || dbfs === undefined || !Number.isFinite(dbfs)) {
      $('level-value').textContent = '\u2013';
      fill.style.width = '0%';
      meter.setAttribute('aria-valuenow', String(METER_FLOOR_DBFS));
      meter.setAttribute('aria-valuetext', 'no level');
      return;
    }
    const silent = dbfs <= -120;  // the analysis reports digital silence as -200 dBFS
    const shown = state.splOffset === null ? dbfs : dbfs + state.splOffset;
    $('level-value').textContent = silent ? 'silence' : shown.toFixed(1);
    const share = Math.min(1, Math.max(0, (dbfs - METER_FLOOR_DBFS) / -METER_FLOOR_DBFS));
    fill.style.width = `${(100 * share).toFixed(1)}%`;
    meter.setAttribute('aria-valuenow', String(Math.max(METER_FLOOR_DBFS, Math.min(0, dbfs)).toFixed(1)));
    meter.setAttribute('aria-valuetext', silent ? 'digital silence' : `${dbfs.toFixed(1)} dBFS` +
      (state.splOffset === null ? '' : `, ${shown.toFixed(1)} dB SPL (calibrated)`));
  }

  // ---- panels -------------------------------------------------------------------------------------------

  function renderLevelUnit() {
    const calibrated = state.splOffset !== null && state.splOffset !== undefined;
    $('level-unit').textContent = calibrated ? 'dB SPL (calibrated)' : 'dBFS';
    $('level-note').textContent = calibrated
      ? `dB SPL = dBFS ${P.signed(state.splOffset, 1)} dB (the daemon's calibration); the bar shows dBFS`
      : 'not calibrated: digital level in dBFS only';
  }

  function renderBands() {
    const list = $('band-states');
    list.replaceChildren();
    if (!state.bands.length) {
      list.append(el('li', 'band-none', 'no band set'));
      return;
    }
    for (const b of state.bands) {
      const key = state.bandStates.get(b.name) || 'unknown';
      const w = STATE_WORDS[key] || { sign: '?', word: key };
      const li = el('li', `band-state state-${key}`);
      li.dataset.band = b.name;
      li.dataset.state = key;
      const swatch = el('span', 'swatch');
      swatch.setAttribute('aria-hidden', 'true');
      swatch.style.background = PALETTE.bandFill[slotOf(b.name) % PALETTE.bandFill.length];
      swatch.style.borderColor = PALETTE.bandEdge[slotOf(b.name) % PALETTE.bandEdge.length];
      const sign = el('span', 'state-sign', w.sign);
      sign.setAttribute('aria-hidden', 'true');
      li.append(swatch, el('span', 'band-name', b.name), ' ', el('span', 'band-limits', limitsText(b)), ' ', sign,
        ' ', el('strong', 'state-word', w.word));
      list.append(li);
    }
  }

  function renderExercise() {
    const e = state.exercise;
    const box = $('exercise-now');
    let text = 'No exercise running.';
    if (e) {
      const newest = store.newestTime;
      const elapsed = Number.isFinite(newest) ? Math.max(0, newest - e.started_s) : NaN;
      text = `Exercise running: ${exerciseName(e)}, since ${e.started_s.toFixed(1)} s` +
        (Number.isFinite(elapsed) ? ` (${P.formatDuration(elapsed)})` : '');
    }
    box.className = `exercise-now ${e ? 'exercise-running' : 'exercise-idle'}`;
    box.querySelector('.exercise-sign').textContent = e ? '\u25b6' : '\u25a1';
    $('exercise-text').textContent = text;
    const inForm = $('exercise-state');
    if (inForm) inForm.textContent = text;
  }

  function renderStats() {
    const s = state.stats;
    const set = (id, text) => { $(id).textContent = text; };
    if (!s) {
      for (const id of ['s-voiced', 's-median', 's-range', 's-sd', 's-level', 's-dose-time', 's-dose-cycles']) set(id, '\u2013');
      $('stats-window').textContent = '';
      return;
    }
    $('stats-window').textContent = `(last ${s.window_s.toFixed(0)} s)`;
    set('s-voiced', pct(s.voiced_fraction));
    set('s-median', s.f0_p50_hz === null ? '\u2013' : `${P.formatHz(s.f0_p50_hz)} \u00b7 ${P.formatNote(s.f0_p50_hz)}`);
    set('s-range', s.f0_range_st === null ? '\u2013'
      : `${s.f0_range_st.toFixed(1)} st \u00b7 ${Math.round(s.f0_p5_hz)}\u2013${Math.round(s.f0_p95_hz)} Hz`);
    set('s-sd', s.f0_sd_st === null ? '\u2013' : `${s.f0_sd_st.toFixed(2)} st`);
    const calibrated = s.level_mean_db_spl !== null && s.level_mean_db_spl !== undefined;
    set('s-level', s.level_mean_dbfs === null ? '\u2013' : calibrated
      ? `${s.level_mean_db_spl.toFixed(1)} dB SPL (calibrated) \u00b7 ${s.level_mean_dbfs.toFixed(1)} dBFS`
      : `${s.level_mean_dbfs.toFixed(1)} dBFS`);
    set('s-dose-time', P.formatDuration(s.session_voiced_s));
    set('s-dose-cycles', `${P.formatCount(s.session_cycle_dose)} cycles`);
    $('contour').setAttribute('aria-label', `F0 contour of the last ${state.windowS} s` +
      (s.f0_p50_hz === null ? ': no voiced frame' : `: median ${P.formatHz(s.f0_p50_hz)}, p5\u2013p95 ` +
        `${Math.round(s.f0_p5_hz)}\u2013${Math.round(s.f0_p95_hz)} Hz, voiced ${pct(s.voiced_fraction)}`));
  }

  function renderReference() {
    $('axis-caption').textContent = `semitones re ${P.formatHz(state.refHz)} (${P.formatNote(state.refHz)}) \u00b7 ` +
      'lines: equal-tempered notes, A4 = 440 Hz \u00b7 note names left, Hz right';
    const now = $('reference-now');
    if (now) now.textContent = `${P.formatHz(state.refHz)} (${P.formatNote(state.refHz)})`;
    for (const id of ['band-low', 'band-high', 'reference-value']) preview(id);
    requestDraw();
  }

  function addEvent(timeS, what, text, kind) {
    const list = $('events');
    const li = el('li', `event kind-${kind}`);
    const when = el('span', 'event-time', timeS === null ? clock() : `${timeS.toFixed(2)} s`);
    li.append(when, ' ', el('span', 'event-what', what), ' ', el('span', 'event-text', text));
    list.prepend(li);
    while (list.children.length > EVENT_LIMIT) list.lastElementChild.remove();
  }

  function alertOn(key, title, text) {
    let item = $('alerts').querySelector(`[data-key="${key}"]`);
    if (!item) {
      item = el('p', 'alert');
      item.dataset.key = key;
      $('alerts').append(item);
    }
    item.replaceChildren(el('span', 'alert-sign', '\u26a0'), el('strong', '', `${title}: `), document.createTextNode(text));
    item.querySelector('.alert-sign').setAttribute('aria-hidden', 'true');
  }

  function alertOff(key) {
    const item = $('alerts').querySelector(`[data-key="${key}"]`);
    if (item) item.remove();
  }

  // ---- controls -----------------------------------------------------------------------------------------

  function answer(out, kind, text) {
    if (!out) return;
    out.className = `answer span answer-${kind}`;
    out.textContent = kind === 'error' ? `\u2715 ${text}` : kind === 'ok' ? `\u2713 ${text}` : text;
  }

  function send(request, out, done) {
    if (!state.ws || state.ws.readyState !== WebSocket.OPEN || !state.connected) {
      answer(out, 'error', 'not connected: wait until the page says connected');
      return;
    }
    const id = `w${state.nextId}`;
    state.nextId += 1;
    state.pending.set(id, { out, done });
    answer(out, 'pending', 'sent\u2026');
    state.ws.send(JSON.stringify({ ...request, id }));
  }

  // Shows beside a limit field what it stands for in Hz (the daemon has the last word).
  function preview(id) {
    const input = $(id);
    if (!input) return;
    const out = $(`${id === 'reference-value' ? 'reference' : id}-hz`);
    const hz = P.limitHz(input.value, state.refHz);
    out.textContent = input.value.trim() === '' ? '' : hz === null ? 'not a form the daemon reads'
      : `= ${P.formatHz(hz)} (${P.formatNote(hz)})`;
  }

  function renderClearChoices() {
    const select = $('clear-band-name');
    if (!select) return;
    const keep = select.value;
    select.replaceChildren();
    for (const b of state.bands) select.append(new Option(`${b.name} (${limitsText(b)})`, b.name));
    if (!state.bands.length) select.append(new Option('no band set', ''));
    if (state.bands.some((b) => b.name === keep)) select.value = keep;
  }

  function renderPresets() {
    const select = $('exercise-preset');
    if (!select) return;
    const keep = select.value;
    select.replaceChildren(...state.presets.map((p) => {
      const label = state.presetLabels.get(p);
      return new Option(label ? `${label} (${p})` : p, p);
    }));
    if (state.presets.includes(keep)) select.value = keep;
  }

  // The unknown_preset error names the daemon's presets ("...; known: a, b"): offer those from then on.
  function learnPresets(message) {
    const m = /known: (.+)$/.exec(message);
    if (!m) return;
    const names = m[1].split(',').map((x) => x.trim()).filter((x) => /^[\w.-]{1,64}$/.test(x));
    if (names.length) {
      state.presets = names;
      renderPresets();
    }
  }

  function renderControls() {
    const slot = $('controls-slot');
    slot.replaceChildren();
    if (state.role !== 'supervisor' && state.role !== 'lab') return;
    const part = $('controls-template').content.cloneNode(true);
    for (const form of part.querySelectorAll('form[data-for]')) {
      if (!form.dataset.for.split(' ').includes(state.role)) form.remove();
    }
    if (state.role === 'lab') part.querySelector('#controls-h').textContent = 'Lab controls';
    slot.append(part);

    const setBand = $('set-band-form');
    if (setBand) {
      for (const id of ['band-low', 'band-high']) $(id).addEventListener('input', () => preview(id));
      setBand.addEventListener('submit', (e) => {
        e.preventDefault();
        const out = $('set-band-answer');
        const name = $('band-name').value.trim();
        const low = P.requestValue($('band-low').value);
        const high = P.requestValue($('band-high').value);
        if (!name || low === null || high === null) {
          answer(out, 'error', 'give a name, a low and a high limit');
          return;
        }
        send({ type: 'set_band', name, low, high }, out, () => `band ${name} set`);
      });
    }
    const clear = $('clear-band-form');
    if (clear) {
      clear.addEventListener('submit', (e) => {
        e.preventDefault();
        const out = $('clear-band-answer');
        const name = $('clear-band-name').value;
        if (!name) {
          answer(out, 'error', 'no band to clear');
          return;
        }
        send({ type: 'clear_band', name }, out, () => `band ${name} cleared`);
      });
      renderClearChoices();
    }
    const exercise = $('exercise-form');
    if (exercise) {
      renderPresets();
      exercise.addEventListener('submit', (e) => {
        e.preventDefault();
        const out = $('exercise-answer');
        const preset = $('exercise-preset-other').value.trim() || $('exercise-preset').value;
        const label = $('exercise-label').value.trim();
        if (!preset) {
          answer(out, 'error', 'choose a preset');
          return;
        }
        send({ type: 'start_exercise', preset, ...(label ? { label } : {}) }, out, () => `exercise ${preset} started`);
      });
      $('end-exercise').addEventListener('click', () => {
        send({ type: 'end_exercise' }, $('exercise-answer'), () => 'exercise ended');
      });
      renderExercise();
    }
    const reference = $('reference-form');
    if (reference) {
      $('reference-value').addEventListener('input', () => preview('reference-value'));
      reference.addEventListener('submit', (e) => {
        e.preventDefault();
        const out = $('reference-answer');
        const value = P.requestValue($('reference-value').value);
        if (value === null) {
          answer(out, 'error', 'give a pitch');
          return;
        }
        send({ type: 'set_reference', reference: value }, out, () => 'reference set');
      });
      renderReference();
    }
    const mark = $('mark-form');
    if (mark) {
      mark.addEventListener('submit', (e) => {
        e.preventDefault();
        const out = $('mark-answer');
        const label = $('mark-label').value.trim();
        if (!label) {
          answer(out, 'error', 'give the marker a label');
          return;
        }
        send({ type: 'mark', label }, out, () => `marker "${label}" added`);
      });
    }
  }

  // ---- page ---------------------------------------------------------------------------------------------

  $('window-s').addEventListener('change', (e) => {
    state.windowS = Math.min(MAX_WINDOW_S, Math.max(5, Number(e.target.value) || 10));
    if (state.stats) renderStats();
    requestDraw();
  });
  $('show-crossings').addEventListener('change', (e) => {
    $('events').classList.toggle('hide-crossings', !e.target.checked);
  });
  if (typeof ResizeObserver !== 'undefined') new ResizeObserver(requestDraw).observe($('contour'));
  else window.addEventListener('resize', requestDraw);

  // Read-only, for tests: what the last drawing held and where.
  window.pitchwireView = Object.freeze({
    stats: () => Object.freeze({
      ...view.lastStats, connected: state.connected, role: state.role, frames: store.count,
      capacity: store.capacity, settledApplied: store.settledApplied, settledChanged: store.settledChanged,
      reconnects: state.reconnects, windowS: state.windowS, refHz: state.refHz, step: state.step,
      draws: state.draws,
    }),
    geometry: () => view.geometry,
    palette: () => PALETTE,
    bandSlot: (name) => state.bandSlots.get(name),
  });

  connect();
  requestDraw();
})();
