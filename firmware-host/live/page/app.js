// kermalux live view: reads server-sent events (journal records and panel
// calls) and shows them. It sends nothing back but the GET of the stream.
"use strict";
(function () {
  const TREND = 60;      // readings kept per meter for the trend line
  const SAID = 12;       // messages kept in "what the board said"
  let S;
  function reset(keep) {
    S = {
      session: null, info: null, steps: keep ? keep.steps : [], title: keep ? keep.title : "",
      warn: keep ? keep.warn : 270, alarm: keep ? keep.alarm : 300,
      step: 0, of: 0, stepID: "", prompt: "", next: "", waiting: false,
      beam: false, beamS: 0, beamMono: 0, lastMono: 0, beamNote: "",
      meters: {}, order: [], air: {}, results: [], retakes: [], acks: [], prompts: {}, said: [],
      lastRetry: "", outcome: null,
    };
  }
  reset();

  const $ = (id) => document.getElementById(id);
  // The page's texts in the engineer's language (the server writes them
  // into the page as JSON): tt() a text, tf() a format with %s, %d or
  // %[n]s filled in order, name() a journal key as words.
  const L = (() => { try { return JSON.parse($("texts").textContent) || {}; } catch (e) { return {}; } })();
  const T = L.texts || {}, N = L.names || {}, DEC = L.decimal || ".";
  const tt = (s) => T[s] || s;
  function tf(f) {
    const args = Array.prototype.slice.call(arguments, 1);
    let i = 0;
    return tt(f).replace(/%(?:\[(\d+)\])?[sdv]/g, (_, n) => String(args[n ? Number(n) - 1 : i++]));
  }
  const name = (k) => N[k] || words(k);
  // num puts the language's decimal separator into a number written
  // with a point.
  const num = (s) => (DEC === "." ? s : String(s).replace(/(\d)\.(\d)/g, "$1" + DEC + "$2"));
  function el(tag, cls, text) {
    const e = document.createElement(tag);
    if (cls) e.className = cls;
    if (text !== undefined && text !== null) e.textContent = String(text);
    return e;
  }
  function clear(e) { while (e.firstChild) e.removeChild(e.firstChild); }
  // expOf is the power of ten of v written with n+1 significant digits.
  const expOf = (v, n) => Number(v.toExponential(n).split("e")[1]);
  // fmt writes a number with four significant digits in fixed notation,
  // trailing zeros kept, as the report does.
  function fmt(v) {
    if (typeof v !== "number" || !isFinite(v)) return "–";
    if (v === 0) return "0";
    return num(v.toFixed(Math.min(Math.max(3 - expOf(v, 3), 0), 15)));
  }
  // pm writes v ± u with u rounded to two significant digits and v to the
  // same decimal place, in fixed notation (JCGM 100:2008 7.2.6), as the
  // report and the demo summary do; without an uncertainty, v alone.
  function pm(v, u) {
    if (typeof v !== "number" || !isFinite(v)) return "–";
    if (typeof u !== "number" || !(u > 0) || !isFinite(u)) return fmt(v);
    const e = expOf(u, 1);
    if (e >= 2) {
      const p = Math.pow(10, e - 1);
      return (Math.round(v / p) * p).toFixed(0) + " ± " + (Math.round(u / p) * p).toFixed(0);
    }
    const d = Math.min(Math.max(1 - e, 0), 12);
    return num(v.toFixed(d)) + " ± " + num(u.toFixed(d));
  }
  // unitText: a dimensionless figure ("1") shows no unit symbol.
  const unitText = (u) => (u && u !== "1" ? " " + u : "");
  function mmss(s) {
    s = Math.max(0, Math.floor(s));
    return Math.floor(s / 60) + ":" + String(s % 60).padStart(2, "0");
  }
  function clock(wall) {
    if (!wall) return "";
    const d = new Date(wall);
    const two = (n) => String(n).padStart(2, "0");
    return isNaN(d) ? "" : two(d.getHours()) + ":" + two(d.getMinutes()) + ":" + two(d.getSeconds());
  }
  const words = (s) => String(s || "").replace(/_/g, " ");
  function said(text, level, wall) {
    S.said.push({ text, level, wall });
    if (S.said.length > SAID) S.said.shift();
  }

  function apply(ev) {
    const p = ev.payload || {};
    if (ev.mono_ns) S.lastMono = Math.max(S.lastMono, ev.mono_ns);
    switch (ev.kind) {
      case "live_hello":
        if (!p.after) reset({ steps: p.steps || [], title: p.title, warn: p.beam_warn_s, alarm: p.beam_alarm_s });
        S.steps = p.steps || S.steps; S.title = p.title || S.title;
        S.warn = p.beam_warn_s || S.warn; S.alarm = p.beam_alarm_s || S.alarm;
        if (p.session) S.session = p.session;
        break;
      case "live_session":
        if (S.session && S.session !== p.id) reset(S);
        S.session = p.id;
        break;
      case "session":
        S.info = p;
        break;
      case "step":
        if (p.state === "started" || p.state === "resumed") {
          S.step = p.index; S.of = p.of; S.stepID = p.id;
          if (S.steps[p.index - 1] && !S.waiting) S.prompt = S.steps[p.index - 1].text;
          S.next = "";
        } else if (p.state === "retake") {
          S.retakes.push({ step: p.index, id: p.id, mode: p.field_mode, reason: p.reason || S.lastRetry || tt("retaken"), wall: ev.wall });
        }
        break;
      case "prompt":
        if (ev.seq) S.prompts[ev.seq] = p;
        if (p.level === "retry") S.lastRetry = p.text;
        said(p.text, p.level, ev.wall);
        if (p.asked) { S.prompt = p.text; S.waiting = true; if (p.step) S.step = p.step; }
        break;
      case "ack": {
        S.waiting = false;
        const pr = S.prompts[p.prompt_seq];
        if (pr && pr.action === "check") S.acks.push({ text: p.text, at: p.at || ev.wall, answer: p.answer });
        break;
      }
      case "value":
        if (p.name === "temperature" || p.name === "pressure" || p.name === "humidity") S.air[p.name] = p;
        break;
      case "reading": {
        const key = p.meter || p.quantity;
        let m = S.meters[key];
        if (!m) { m = S.meters[key] = { hist: [] }; S.order.push(key); }
        m.value = p.value; m.unit = p.unit; m.status = p.status; m.quantity = p.quantity;
        m.used = p.used; m.position = p.position; m.calibrated = p.calibrated;
        if (typeof p.value === "number" && isFinite(p.value)) { m.hist.push(p.value); if (m.hist.length > TREND) m.hist.shift(); }
        break;
      }
      case "event":
        switch (p.name) {
          case "beam_on": S.beam = true; S.beamS = p.beam_on_s || 0; S.beamMono = ev.mono_ns || S.lastMono; break;
          case "beam_off": S.beam = false; S.beamS = p.beam_on_s || S.beamS; break;
          case "beam_warning": S.beamNote = tf("Warning: %s", p.detail ? words(p.detail) : tt("cumulative beam-on near the alarm")); S.beamS = p.beam_on_s || S.beamS; break;
          case "beam_alarm": S.beamNote = tf("ALARM: %s", p.detail ? words(p.detail) : tt("five minutes of beam-on")); S.beamS = p.beam_on_s || S.beamS; break;
          case "kerma_out_of_range": S.beamNote = tt("Stopped: kerma rate far out of range"); break;
          case "samples_discarded": case "meter_lost": case "meter_back": case "reading_error":
            said(name(p.name) + (p.detail ? ": " + p.detail : ""), "retry", ev.wall); break;
        }
        break;
      case "result": {
        // A judged result is journalled again with its verdict: replace.
        const key = [p.procedure, p.step, p.quantity, p.field_mode || ""].join("|");
        const i = S.results.findIndex((r) => r._key === key);
        p._key = key;
        if (i >= 0) S.results[i] = p; else S.results.push(p);
        break;
      }
      case "session_end":
        S.outcome = p; S.prompt = p.outcome === "complete" ? tt("All steps done.") : tf("Session %s.", name(p.outcome));
        S.next = tt("the end"); S.waiting = false; S.beam = false; S.beamS = p.beam_on_s || S.beamS;
        break;
      case "panel_ask":
        S.prompt = p.text; S.waiting = true;
        if (p.step) { S.step = p.step; S.of = p.of || S.of; }
        S.next = p.next || "";
        break;
      case "panel_say":
        break; // journalled as a prompt record, shown from there
      case "panel_indicate":
        if (p.on === "beam_on") S.beam = true;
        break;
    }
  }

  function beamSeconds() {
    let s = S.beamS;
    if (S.beam && S.lastMono > S.beamMono) s += (S.lastMono - S.beamMono) / 1e9;
    return s;
  }

  function nextText() {
    if (S.next) return S.next;
    if (!S.step) return S.steps.length ? S.steps[0].text : "–";
    // What the operator will hear next: computing and judging are the
    // board's own work, not a step anyone waits for.
    for (let k = S.step; k < S.steps.length; k++) {
      const n = S.steps[k];
      if (n.kind !== "compute" && n.kind !== "judge") return n.text || words(n.kind);
    }
    return tt("the results, then the end");
  }

  function trend(hist) {
    const svg = document.createElementNS("http://www.w3.org/2000/svg", "svg");
    svg.setAttribute("viewBox", "0 0 100 40");
    svg.setAttribute("preserveAspectRatio", "none");
    if (hist.length > 1) {
      let lo = Math.min(...hist), hi = Math.max(...hist);
      if (hi - lo < 1e-12) { lo -= 1; hi += 1; }
      const pts = hist.map((v, i) => (i * 100 / (TREND - 1)).toFixed(2) + "," + (37 - 34 * (v - lo) / (hi - lo)).toFixed(2));
      const pl = document.createElementNS("http://www.w3.org/2000/svg", "polyline");
      pl.setAttribute("points", pts.join(" "));
      svg.appendChild(pl);
    }
    return svg;
  }

  function render() {
    pending = false;
    const i = S.info;
    $("where").textContent = i ? [i.site, i.room, i.intensifier_model, i.intensifier_serial].filter(Boolean).join(" · ") : (S.title || tt("waiting for the board…"));
    $("progress").textContent = S.of ? tf("Step %d of %d", S.step, S.of) + (S.title ? " · " + S.title : "") : (S.title || tt("no session yet"));
    $("progress-bar").style.width = S.of ? (100 * S.step / S.of) + "%" : "0";
    $("prompt").textContent = S.prompt || "";
    $("next").textContent = nextText();

    const bs = beamSeconds();
    const st = $("beam-state");
    st.textContent = S.beam ? tt("BEAM ON") : tt("beam off");
    st.className = "pill " + (S.beam ? "on" : "off");
    $("beam-time").textContent = mmss(bs);
    document.querySelector(".beamtime .of").textContent = tf("of %s cumulative", mmss(S.alarm));
    $("beam-bar").style.width = Math.min(100, 100 * bs / S.alarm) + "%";
    $("beam-warn").style.left = (100 * S.warn / S.alarm) + "%";
    $("beam-bar").parentNode.classList.toggle("alarm", bs >= S.alarm);
    $("beam-note").textContent = S.beamNote;

    const ms = $("meters"); clear(ms);
    if (!S.order.length) ms.appendChild(el("p", "empty", tt("no readings yet")));
    for (const k of S.order) {
      const m = S.meters[k];
      const d = el("div", "meter"); d.dataset.meter = k;
      d.appendChild(el("span", "name", name(k)));
      const v = el("span", "val", fmt(m.value)); v.appendChild(el("span", "unit", " " + (m.unit || ""))); d.appendChild(v);
      d.appendChild(trend(m.hist));
      d.appendChild(el("span", "status", [words(m.status), m.used ? tt("used") : tt("settling or dark"), m.position].filter(Boolean).join(" · ")));
      ms.appendChild(d);
    }

    const air = $("air"); clear(air);
    const names = Object.keys(S.air);
    if (!names.length) air.appendChild(el("p", "empty", tt("not entered yet")));
    for (const n of names) {
      const a = S.air[n];
      // As entered or read (the shortest form of six significant digits).
      const d = el("div", "", num(String(Number(Number(a.value).toPrecision(6)))) + " " + a.unit); d.dataset.air = n;
      d.appendChild(el("small", "", name(n) + " · " + (a.source ? name(a.source) : "")));
      air.appendChild(d);
    }

    const rs = $("results"); clear(rs);
    if (!S.results.length) rs.appendChild(el("p", "empty", tt("none computed yet")));
    else {
      const t = el("table", "results");
      const hr = el("tr"); ["Figure", "Value ± U", "Verdict", "Decided by"].forEach((h) => hr.appendChild(el("th", "", tt(h))));
      const th = el("thead"); th.appendChild(hr); t.appendChild(th);
      const tb = el("tbody");
      for (const r of S.results) {
        const tr = el("tr"); tr.dataset.quantity = r.quantity;
        tr.appendChild(el("td", "q", name(r.quantity) + (r.field_mode ? ", " + r.field_mode : "")));
        // A figure that could not be measured has no value: say so.
        tr.appendChild(el("td", "num", r.verdict === "not_measurable" ? tt("not measurable") : pm(r.value, r.expanded_uncertainty) + unitText(r.unit)));
        const vd = el("td"); vd.appendChild(el("span", "verdict " + (r.verdict || "info"), name(r.verdict || "info"))); tr.appendChild(vd);
        const dec = words(r.decided_by);
        tr.appendChild(el("td", "dec", dec + (r.calibrated === false && !/calibrated/.test(r.decided_by || "") ? " " + tt("(not calibrated)") : "")));
        tb.appendChild(tr);
      }
      t.appendChild(tb); rs.appendChild(t);
    }

    const rt = $("retakes"); clear(rt);
    if (!S.retakes.length) rt.appendChild(el("li", "empty", tt("none")));
    for (const r of S.retakes) {
      const li = el("li"); li.appendChild(el("time", "", clock(r.wall)));
      li.appendChild(document.createTextNode(tf("step %d", r.step) + (r.mode ? " (" + r.mode + ")" : "") + ": " + r.reason));
      rt.appendChild(li);
    }

    const ak = $("acks"); clear(ak);
    if (!S.acks.length) ak.appendChild(el("li", "empty", tt("none yet")));
    for (const a of S.acks) {
      const li = el("li"); li.appendChild(el("time", "", clock(a.at))); li.appendChild(document.createTextNode("✓ " + a.text)); ak.appendChild(li);
    }

    const sd = $("said"); clear(sd);
    for (const m of S.said.slice().reverse()) {
      const li = el("li", m.level || ""); li.appendChild(el("time", "", clock(m.wall))); li.appendChild(document.createTextNode(m.text)); sd.appendChild(li);
    }
  }

  let pending = false;
  function schedule() { if (!pending) { pending = true; requestAnimationFrame(render); } }

  function connect() {
    const es = new EventSource("/events");
    es.onopen = () => { const l = $("link"); l.textContent = tt("live"); l.className = "link"; };
    es.onerror = () => { const l = $("link"); l.textContent = tt("reconnecting"); l.className = "link off"; };
    es.onmessage = (m) => {
      try { apply(JSON.parse(m.data)); } catch (e) { return; }
      schedule();
    };
  }
  render();
  connect();
})();
