// live.js: connects to pitchwired over protocol v1 (docs/protocol.md) and shows the newest frame, the
// statistics and the events. The token in this page's URL (?token=...) is passed on, so the supervisor
// page gets the supervisor role.
"use strict";
(() => {
  const $ = (id) => document.getElementById(id);
  const names = ["C", "C#", "D", "D#", "E", "F", "F#", "G", "G#", "A", "A#", "B"];
  // Nearest equal-tempered note, A4 = 440 Hz (ISO 16), and the offset in cents.
  const noteOf = (hz) => {
    const midi = 69 + 12 * Math.log2(hz / 440);
    const n = Math.round(midi);
    return `${names[((n % 12) + 12) % 12]}${Math.floor(n / 12) - 1} ${Math.round((midi - n) * 100) >= 0 ? "+" : ""}${Math.round((midi - n) * 100)} cents`;
  };
  const addEvent = (text) => {
    const li = document.createElement("li");
    li.textContent = text;
    $("events").prepend(li);
    while ($("events").children.length > 20) $("events").lastChild.remove();
  };
  let delay = 500;
  const connect = () => {
    const token = new URLSearchParams(location.search).get("token");
    const url = `ws://${location.host}/ws${token ? `?token=${encodeURIComponent(token)}` : ""}`;
    const ws = new WebSocket(url, "pitchwire.v1");
    ws.onopen = () => {
      delay = 500;
      $("status").textContent = "connected";
      ws.send(JSON.stringify({ type: "subscribe", id: "live", rate: { fps: 30 }, fields: ["f0_hz", "level_dbfs"] }));
    };
    ws.onmessage = (e) => {
      const m = JSON.parse(e.data);
      if (m.type === "hello") $("role").textContent = m.role;
      else if (m.type === "frame") {
        $("f0").textContent = m.f0_hz === null ? "–" : m.f0_hz.toFixed(1);
        $("note").textContent = m.f0_hz === null ? "unvoiced" : noteOf(m.f0_hz);
        $("level").textContent = m.level_dbfs.toFixed(1);
      } else if (m.type === "stats") {
        $("stats").textContent = m.f0_p50_hz === null ? `voiced ${(100 * m.voiced_fraction).toFixed(0)} %`
          : `median ${m.f0_p50_hz.toFixed(1)} Hz · p5–p95 ${m.f0_p5_hz.toFixed(1)}–${m.f0_p95_hz.toFixed(1)} Hz · SD ${m.f0_sd_st === null ? "–" : m.f0_sd_st.toFixed(2)} st · voiced ${(100 * m.voiced_fraction).toFixed(0)} %`;
      } else if (m.type === "event") addEvent(`${m.time_s.toFixed(2)} s ${m.kind} ${JSON.stringify(m.payload)}`);
    };
    ws.onclose = () => {
      $("status").textContent = `disconnected; trying again in ${(delay / 1000).toFixed(1)} s`;
      setTimeout(connect, delay);
      delay = Math.min(delay * 2, 5000);
    };
  };
  connect();
})();
