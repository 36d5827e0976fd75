// Scorer's monitor page: the overview at / and a model at /models/{model}. Reads the monitor API and its Server-Sent
// Events (through fetch, so that an API key can go in the Authorization header), draws every chart as SVG, and sends the
// admin actions. No library, nothing from another origin.
'use strict';

(() => {
  const KEY = 'scorer.apiKey';
  const SVG = 'http://www.w3.org/2000/svg';
  const $ = (id) => document.getElementById(id);

  // ---------------------------------------------------------------- the API

  class ApiError extends Error {
    constructor(status, message) {
      super(message);
      this.status = status;
    }
    get refused() { return this.status === 401 || this.status === 403; }
    get title() {
      return ({ 400: 'Bad request', 401: 'Refused: no valid key', 403: 'Refused: the key lacks the role', 404: 'Not found',
        413: 'Too large', 429: 'Too many requests' })[this.status] || `Failed (${this.status || 'network'})`;
    }
  }

  function headers(json) {
    const h = { Accept: 'application/json' };
    const key = sessionStorage.getItem(KEY);
    if (key) h.Authorization = `Bearer ${key}`;
    if (json) h['Content-Type'] = 'application/json';
    return h;
  }

  async function failure(response) {
    let message = `${response.status} ${response.statusText}`;
    try {
      const body = await response.json();
      if (body && body.message) message = body.message;
    } catch { /* not JSON */ }
    return new ApiError(response.status, message);
  }

  async function api(path, { method = 'GET', body, signal } = {}) {
    let response;
    try {
      response = await fetch(path, { method, headers: headers(body !== undefined), body: body === undefined ? undefined : JSON.stringify(body), signal, cache: 'no-store' });
    } catch (e) {
      if (e.name === 'AbortError') throw e;
      throw new ApiError(0, 'the service did not answer');
    }
    if (!response.ok) throw await failure(response);
    return response.json();
  }

  // Reads a Server-Sent Events stream until it ends; onEvent(kind, data) for each event.
  async function readEvents(path, onEvent, signal) {
    let response;
    try {
      response = await fetch(path, { headers: { ...headers(false), Accept: 'text/event-stream' }, signal, cache: 'no-store' });
    } catch (e) {
      if (e.name === 'AbortError') throw e;
      throw new ApiError(0, 'the service did not answer');
    }
    if (!response.ok) throw await failure(response);
    const reader = response.body.pipeThrough(new TextDecoderStream()).getReader();
    let buffer = '';
    for (;;) {
      const { value, done } = await reader.read();
      if (done) return;
      buffer += value;
      let end;
      while ((end = buffer.indexOf('\n\n')) >= 0) {
        const block = buffer.slice(0, end);
        buffer = buffer.slice(end + 2);
        let kind = 'message';
        const data = [];
        for (const line of block.split('\n')) {
          if (line.startsWith('event:')) kind = line.slice(6).trim();
          else if (line.startsWith('data:')) data.push(line.slice(5).replace(/^ /, ''));
        }
        // keepalive (empty data, every 15 s) only says the stream is open.
        if (kind !== 'keepalive' && data.length > 0 && data.join('') !== '') onEvent(kind, JSON.parse(data.join('\n')));
      }
    }
  }

  // Keeps one stream open, reconnecting with backoff; a refusal stops it until the key changes.
  function follow(pathOf, onEvent, onRefused) {
    let controller = null;
    let attempt = 0;
    let timer = null;
    // Not a live region: it changes every few seconds. The word changes with the state only; the time is in its title.
    const live = $('live');
    const setLive = (state, text) => {
      live.dataset.state = state;
      if (live.textContent !== text) live.textContent = text;
      live.title = state === 'live' ? `last event at ${clock(new Date())}` : text;
    };

    async function run() {
      controller = new AbortController();
      const mine = controller;
      setLive('connecting', 'connecting');
      try {
        await readEvents(pathOf(), (kind, data) => {
          attempt = 0;
          setLive('live', 'live');
          onEvent(kind, data);
        }, mine.signal);
        if (mine.signal.aborted) return;
        retry();
      } catch (e) {
        if (mine.signal.aborted || e.name === 'AbortError') return;
        if (e instanceof ApiError && (e.refused || e.status === 404 || e.status === 400)) {
          setLive('refused', e.refused ? 'refused' : 'stopped');
          onRefused(e);
          return;
        }
        retry();
      }
    }

    function retry() {
      attempt += 1;
      const wait = Math.min(30000, 1000 * 2 ** Math.min(attempt - 1, 5));
      setLive('retrying', `reconnecting in ${Math.round(wait / 1000)} s`);
      timer = setTimeout(run, wait);
    }

    return {
      restart() { this.stop(); attempt = 0; run(); },
      stop() { clearTimeout(timer); if (controller) controller.abort(); },
    };
  }

  // ---------------------------------------------------------------- words, numbers, times

  // The service's four status names (docs/monitoring.md), each with a word, a shape and a tint.
  const STATUS_WORDS = {
    fine: { word: 'fine', cls: 'fine' },
    watch: { word: 'watch', cls: 'watch' },
    recalibrate: { word: 'recalibrate', cls: 'recal' },
    'refit-due': { word: 'refit due', cls: 'refit' },
  };
  const statusWords = (status) => STATUS_WORDS[status] || { word: 'no report yet', cls: 'none' };

  function chip(status, big) {
    const w = statusWords(status);
    const span = h('span', { class: `chip ${w.cls}${big ? ' big' : ''}`, 'data-status': status || '' },
      h('span', { class: 'mark', 'aria-hidden': 'true' }), w.word);
    return span;
  }

  const WINDOW_WORDS = { '24h': '24 h', '7d': '7 days', '30d': '30 days', all: 'all' };
  const windowWord = (w) => WINDOW_WORDS[w] || w;
  const integer = new Intl.NumberFormat('en', { maximumFractionDigits: 0 });
  const count = (n) => (n === undefined || n === null ? '–' : integer.format(Number(n)));
  function num(x, digits = 3) {
    if (x === undefined || x === null || !Number.isFinite(Number(x))) return '–';
    const v = Number(x);
    if (v !== 0 && Math.abs(v) < 0.001) return v.toExponential(1);
    return v.toFixed(digits);
  }
  const interval = (e, digits = 3) => (e && e.lower !== undefined && e.upper !== undefined ? `${num(e.lower, digits)} to ${num(e.upper, digits)}` : '');
  const clockFormat = new Intl.DateTimeFormat(undefined, { hour: '2-digit', minute: '2-digit', second: '2-digit' });
  const dayFormat = new Intl.DateTimeFormat(undefined, { month: 'short', day: 'numeric' });
  const clock = (d) => clockFormat.format(d);
  function when(iso) {
    const d = new Date(iso);
    const seconds = Math.round((Date.now() - d.getTime()) / 1000);
    const ago = seconds < 60 ? `${Math.max(0, seconds)} s ago` : seconds < 3600 ? `${Math.round(seconds / 60)} min ago`
      : seconds < 86400 ? `${Math.round(seconds / 3600)} h ago` : `${Math.round(seconds / 86400)} days ago`;
    const stamp = seconds < 86400 ? clock(d) : `${dayFormat.format(d)} ${clock(d)}`;
    return h('time', { datetime: iso, title: d.toISOString() }, `${stamp} (${ago})`);
  }
  const firstSentence = (text) => { const m = /^(.*?[.!?])(\s|$)/.exec(text || ''); return m ? m[1] : (text || ''); };

  // ---------------------------------------------------------------- DOM and SVG

  function h(tag, attrs, ...children) {
    const node = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) if (v !== undefined && v !== null && v !== false) node.setAttribute(k, v === true ? '' : v);
    for (const c of children.flat(Infinity)) if (c !== undefined && c !== null && c !== false) node.append(c instanceof Node ? c : String(c));
    return node;
  }

  function s(tag, attrs, ...children) {
    const node = document.createElementNS(SVG, tag);
    for (const [k, v] of Object.entries(attrs || {})) if (v !== undefined && v !== null) node.setAttribute(k, typeof v === 'number' ? +v.toFixed(2) : v);
    for (const c of children.flat(Infinity)) if (c !== undefined && c !== null && c !== false) node.append(c instanceof Node ? c : String(c));
    return node;
  }

  const tip = (text) => s('title', {}, text);

  function scale(d0, d1, r0, r1) {
    const k = d1 === d0 ? 0 : (r1 - r0) / (d1 - d0);
    const f = (v) => r0 + (v - d0) * k;
    f.clamp = (v) => f(Math.min(Math.max(v, Math.min(d0, d1)), Math.max(d0, d1)));
    return f;
  }

  function ticks(min, max, n = 5) {
    if (!(max > min)) return [min];
    const raw = (max - min) / n;
    const mag = 10 ** Math.floor(Math.log10(raw));
    const step = [1, 2, 2.5, 5, 10].map((m) => m * mag).find((m) => raw <= m) || 10 * mag;
    const out = [];
    for (let v = Math.ceil(min / step - 1e-9) * step; v <= max + step * 1e-9; v += step) out.push(+v.toFixed(10));
    return out;
  }

  const tickText = (v) => (Math.abs(v) >= 1000 ? integer.format(v) : String(+v.toPrecision(6)));

  // A chart frame: an SVG with a plot area, grid lines and both axes; returns what the caller draws with.
  function frame({ width = 560, height = 300, left = 52, right = 16, top = 14, bottom = 42, x, y, xTicks, yTicks, xTitle, yTitle, xFormat, yFormat, label }) {
    const svg = s('svg', { viewBox: `0 0 ${width} ${height}`, role: 'img', 'aria-label': label, preserveAspectRatio: 'xMidYMid meet' });
    const px = scale(x[0], x[1], left, width - right);
    const py = scale(y[0], y[1], height - bottom, top);
    const grid = s('g', { class: 'grid' });
    const axis = s('g', { class: 'axis' });
    for (const t of yTicks || ticks(y[0], y[1])) {
      grid.append(s('line', { x1: left, x2: width - right, y1: py(t), y2: py(t) }));
      axis.append(s('text', { x: left - 6, y: py(t) + 3.5, 'text-anchor': 'end' }, (yFormat || tickText)(t)));
    }
    for (const t of xTicks || ticks(x[0], x[1])) {
      grid.append(s('line', { x1: px(t), x2: px(t), y1: top, y2: height - bottom }));
      axis.append(s('text', { x: px(t), y: height - bottom + 15, 'text-anchor': 'middle' }, (xFormat || tickText)(t)));
    }
    svg.append(grid, axis, s('rect', { class: 'frame', x: left, y: top, width: width - left - right, height: height - top - bottom }));
    if (xTitle) svg.append(s('text', { class: 'axis-title', x: (left + width - right) / 2, y: height - 6, 'text-anchor': 'middle' }, xTitle));
    if (yTitle) svg.append(s('text', { class: 'axis-title', transform: `translate(13 ${(top + height - bottom) / 2}) rotate(-90)`, 'text-anchor': 'middle' }, yTitle));
    return { svg, px, py, left, right: width - right, top, bottom: height - bottom };
  }

  function empty(container, text) {
    container.replaceChildren(h('p', { class: 'empty' }, text));
  }

  // ---------------------------------------------------------------- charts

  function reliabilityChart(container, report) {
    const bins = report.reliability || [];
    if (bins.length === 0) {
      empty(container, 'No labelled predictions in this window yet: the diagram appears as outcomes come back.');
      return;
    }
    const top = Math.max(...bins.map((b) => Math.max(b.meanPredicted, b.observedUpper ?? b.observedRate)));
    const max = [0.02, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1].find((m) => m >= top * 1.05) || 1;
    const t = ticks(0, max, 5);
    const f = frame({ width: 560, height: 340, x: [0, max], y: [0, max], xTicks: t, yTicks: t, xTitle: 'mean predicted probability', yTitle: 'observed event rate',
      label: `Reliability diagram over ${bins.length} bins` });
    f.svg.setAttribute('data-labelled', String(report.labelled));
    f.svg.append(s('line', { class: 'diagonal', x1: f.px(0), y1: f.py(0), x2: f.px(max), y2: f.py(max) }),
      s('text', { class: 'halo', x: f.px(max * 0.97), y: f.py(max * 0.97) + 14, 'text-anchor': 'end' }, 'perfect calibration'));
    const most = Math.max(...bins.map((b) => b.count));
    const marks = s('g', { class: 'bins' });
    for (const b of bins) {
      const x = f.px.clamp(b.meanPredicted);
      const lo = f.py.clamp(b.observedLower ?? b.observedRate);
      const hi = f.py.clamp(b.observedUpper ?? b.observedRate);
      const text = `Predicted ${num(b.lower, 1)} to ${num(b.upper, 1)}: ${count(b.count)} predictions, ${count(b.events)} events; ` +
        `mean predicted ${num(b.meanPredicted)}, observed ${num(b.observedRate)} (interval ${num(b.observedLower)} to ${num(b.observedUpper)})`;
      marks.append(
        s('line', { class: 'interval', x1: x, x2: x, y1: lo, y2: hi }),
        s('line', { class: 'interval', x1: x - 4, x2: x + 4, y1: lo, y2: lo }),
        s('line', { class: 'interval', x1: x - 4, x2: x + 4, y1: hi, y2: hi }),
        s('circle', { class: 'bin', cx: x, cy: f.py.clamp(b.observedRate), r: 3.5 + 6.5 * Math.sqrt(b.count / most),
          'data-mean-predicted': String(b.meanPredicted), 'data-observed-rate': String(b.observedRate), 'data-count': String(b.count),
          'data-lower': String(b.lower), 'data-upper': String(b.upper) }, tip(text)));
    }
    f.svg.append(marks);
    container.replaceChildren(f.svg);
  }

  function reliabilityTable(container, report) {
    const bins = report.reliability || [];
    if (bins.length === 0) { container.replaceChildren(); return; }
    container.replaceChildren(h('table', {},
      h('thead', {}, h('tr', {}, ['Predicted', 'Count', 'Events', 'Mean predicted', 'Observed', 'Interval'].map((c, i) => h('th', { class: i ? 'num' : null, scope: 'col' }, c)))),
      h('tbody', {}, bins.map((b) => h('tr', {},
        h('td', {}, `${num(b.lower, 1)} to ${num(b.upper, 1)}`), h('td', { class: 'num' }, count(b.count)), h('td', { class: 'num' }, count(b.events)),
        h('td', { class: 'num' }, num(b.meanPredicted, 4)), h('td', { class: 'num' }, num(b.observedRate, 4)),
        h('td', { class: 'num' }, `${num(b.observedLower, 3)} to ${num(b.observedUpper, 3)}`))))));
  }

  function cusumChart(container, note, paths) {
    if (!paths || !paths.up || !paths.down) {
      empty(container, paths && paths.waiting ? `Not started: ${paths.waiting}.` : 'The charts have not started yet.');
      note.textContent = '';
      return;
    }
    const up = paths.up.points;
    const down = paths.down.points;
    if (up.length === 0) {
      empty(container, `The charts have taken in ${count(paths.outcomes)} outcomes, none of them scored in this window.`);
      note.textContent = '';
      return;
    }
    const x0 = Math.min(up[0][0], down[0][0]);
    const x1 = Math.max(up[up.length - 1][0], down[down.length - 1][0], x0 + 1);
    const hiUp = Math.max(paths.up.threshold, ...up.map((p) => p[1])) * 1.12;
    const hiDown = Math.max(paths.down.threshold, ...down.map((p) => p[1])) * 1.12;
    const f = frame({ width: 560, height: 320, left: 56, x: [x0, x1], y: [-hiDown, hiUp], xTitle: 'outcome, in prediction-time order', yTitle: 'CUSUM statistic',
      yFormat: (v) => tickText(Math.abs(v)), label: `CUSUM paths: upward threshold ${num(paths.up.threshold, 2)}, downward ${num(paths.down.threshold, 2)}` });
    const line = (points, sign) => points.map((p, i) => `${i ? 'L' : 'M'}${f.px(p[0]).toFixed(1)} ${f.py(sign * p[1]).toFixed(1)}`).join('');
    f.svg.append(
      s('line', { class: 'zero', x1: f.left, x2: f.right, y1: f.py(0), y2: f.py(0) }),
      s('line', { class: 'threshold-up', x1: f.left, x2: f.right, y1: f.py(paths.up.threshold), y2: f.py(paths.up.threshold) }),
      s('line', { class: 'threshold-down', x1: f.left, x2: f.right, y1: f.py(-paths.down.threshold), y2: f.py(-paths.down.threshold) }),
      s('path', { class: 'path-up', d: line(up, 1), 'data-chart': 'up' }),
      s('path', { class: 'path-down', d: line(down, -1), 'data-chart': 'down' }));
    const marks = s('g', {});
    for (const [name, sign] of [['up', 1], ['down', -1]]) {
      for (const sig of paths[name].signals) {
        if (sig.index < x0 || sig.index > x1) continue;
        const x = f.px(sig.index);
        const y = f.py(sign * Math.min(sig.statistic, name === 'up' ? hiUp : hiDown));
        const d = sign > 0 ? `M${x} ${y - 9}L${x + 6} ${y + 2}L${x - 6} ${y + 2}Z` : `M${x} ${y + 9}L${x + 6} ${y - 2}L${x - 6} ${y - 2}Z`;
        marks.append(s('path', { class: `signal-${name}`, d, 'data-signal': name },
          tip(`${name === 'up' ? 'Upward' : 'Downward'} signal at outcome ${count(sig.index)} (prediction of ${new Date(sig.time).toLocaleString()}): S = ${num(sig.statistic, 2)}`)));
      }
    }
    f.svg.append(marks,
      s('text', { class: 'label-strong', x: f.right - 4, y: f.py(paths.up.threshold) - 5, 'text-anchor': 'end' }, `upward h = ${num(paths.up.threshold, 2)} (odds ×${num(paths.up.oddsRatio, 2)})`),
      s('text', { class: 'label-strong', x: f.right - 4, y: f.py(-paths.down.threshold) + 14, 'text-anchor': 'end' }, `downward h = ${num(paths.down.threshold, 2)} (odds ×${num(paths.down.oddsRatio, 2)})`));
    container.replaceChildren(f.svg);
    const signals = paths.up.signals.length + paths.down.signals.length;
    note.textContent = `${count(paths.outcomes)} outcomes taken in; ${signals === 0 ? 'no signal' : `${signals} signal${signals > 1 ? 's' : ''}`} in this window.`;
  }

  function psiChart(container, report, overview) {
    const psi = report.psi || {};
    const series = [];
    if (psi.linearPredictor !== undefined && psi.linearPredictor !== null) series.push(['linear predictor', Number(psi.linearPredictor)]);
    for (const [name, value] of Object.entries(psi.features || {}).sort()) series.push([name, Number(value)]);
    if (series.length === 0) {
      empty(container, 'No scored rows with a baseline in this window yet.');
      return;
    }
    const watch = overview ? overview.psiModerate : 0.1;
    const large = overview ? overview.psiLarge : 0.25;
    const max = Math.max(large * 1.3, ...series.map((r) => r[1] * 1.15));
    const rowH = 30;
    const height = 46 + series.length * rowH;
    const left = 150;
    const f = frame({ width: 560, height, left, top: 8, bottom: 38, x: [0, max], y: [0, series.length], yTicks: [], xTitle: `PSI over ${count(psi.rows)} scored rows`,
      label: `PSI per series: ${series.map((r) => `${r[0]} ${num(r[1])}`).join(', ')}` });
    f.svg.insertBefore(s('rect', { class: 'band-watch', x: f.px(watch), y: f.top, width: f.px(large) - f.px(watch), height: f.bottom - f.top }), f.svg.firstChild.nextSibling);
    f.svg.insertBefore(s('rect', { class: 'band-large', x: f.px(large), y: f.top, width: f.right - f.px(large), height: f.bottom - f.top }), f.svg.firstChild.nextSibling);
    f.svg.append(s('text', { x: f.px(watch) + 4, y: f.top + 12 }, 'moderate'), s('text', { x: f.px(large) + 4, y: f.top + 12 }, 'large'));
    series.forEach(([name, value], i) => {
      const y = f.top + 14 + i * rowH;
      const level = value > large ? 'large' : value > watch ? 'watch' : 'ok';
      f.svg.append(
        s('text', { class: 'label-strong', x: left - 8, y: y + 12, 'text-anchor': 'end' }, name),
        s('rect', { class: `bar ${level}`, x: f.px(0), y, width: Math.max(1.5, f.px(Math.min(value, max)) - f.px(0)), height: 16, 'data-series': name, 'data-psi': String(value) },
          tip(`${name}: PSI ${num(value)} (${level === 'ok' ? 'small shift' : level === 'watch' ? 'moderate shift' : 'large shift'})`)),
        s('text', { x: f.px(Math.min(value, max)) + 5, y: y + 12 }, `${num(value)}${level === 'large' ? ' large' : level === 'watch' ? ' moderate' : ''}`));
    });
    container.replaceChildren(f.svg);
  }

  // Ticks at whole multiples of a round span of time (local midnight for days), at most about n of them.
  function timeTicks(t0, t1, n = 5) {
    const spans = [10, 30, 60, 300, 900, 1800, 3600, 10800, 21600, 43200, 86400, 604800].map((x) => x * 1000);
    const span = spans.find((x) => (t1 - t0) / x <= n) || spans[spans.length - 1];
    const offset = span >= 86400000 ? new Date(t0).getTimezoneOffset() * 60000 : 0;
    const out = [];
    for (let t = Math.ceil((t0 - offset) / span) * span + offset; t <= t1; t += span) out.push(t);
    return out;
  }

  function timeText(ms, stepSeconds) {
    const d = new Date(ms);
    return stepSeconds >= 86400 ? dayFormat.format(d) : stepSeconds >= 3600 ? `${dayFormat.format(d)} ${d.getHours()}h` : clock(d);
  }

  // One estimate per bucket with its interval, against a reference line (and optionally a floor).
  function trendChart(container, trend, field, { title, reference, floor, floorLabel, fixed }) {
    const buckets = (trend ? trend.buckets : []).filter((b) => b[field] && Number.isFinite(b[field].estimate));
    if (!trend || buckets.length === 0) {
      empty(container, `${title}: not estimable yet in any bucket (it needs events and non-events).`);
      return;
    }
    const t0 = Date.parse(trend.buckets[0].from);
    const t1 = Date.parse(trend.buckets[trend.buckets.length - 1].to);
    let lo;
    let hi;
    if (fixed) {
      [lo, hi] = fixed;
    } else {
      const values = buckets.map((b) => b[field].estimate).concat([reference]);
      lo = Math.min(...values);
      hi = Math.max(...values);
      const pad = Math.max((hi - lo) * 0.6, 0.25);
      lo -= pad;
      hi += pad;
    }
    const f = frame({ width: 560, height: 190, top: 10, bottom: 36, x: [t0, t1], y: [lo, hi], xTicks: timeTicks(t0, t1, 4), yTicks: ticks(lo, hi, 4),
      xFormat: (v) => timeText(v, trend.stepSeconds), yTitle: title, label: `${title} per bucket of ${trend.stepSeconds} s` });
    f.svg.append(s('line', { class: 'ref', x1: f.left, x2: f.right, y1: f.py.clamp(reference), y2: f.py.clamp(reference) }));
    if (floor !== undefined) {
      f.svg.append(s('line', { class: 'ref', x1: f.left, x2: f.right, y1: f.py.clamp(floor), y2: f.py.clamp(floor) }),
        s('text', { class: 'halo', x: f.right - 4, y: f.py.clamp(floor) - 4, 'text-anchor': 'end' }, floorLabel));
    }
    const width = Math.max(2, (f.right - f.left) / trend.buckets.length);
    const marks = s('g', {});
    for (const b of buckets) {
      const e = b[field];
      const x = f.px((Date.parse(b.from) + Date.parse(b.to)) / 2);
      const lower = Number.isFinite(e.lower) ? e.lower : e.estimate;
      const upper = Number.isFinite(e.upper) ? e.upper : e.estimate;
      marks.append(
        s('line', { class: 'interval', x1: x, x2: x, y1: f.py.clamp(lower), y2: f.py.clamp(upper) }),
        s('circle', { class: 'point', cx: x, cy: f.py.clamp(e.estimate), r: Math.min(4.5, Math.max(2.5, width / 4)), 'data-estimate': String(e.estimate) },
          tip(`${new Date(b.from).toLocaleString()}: ${title} ${num(e.estimate)} (interval ${num(e.lower)} to ${num(e.upper)}) over ${count(b.labelled)} labelled, ${count(b.events)} events`)));
    }
    f.svg.append(marks);
    container.replaceChildren(f.svg);
  }

  function shadowChart(container, tableSlot, report, stage) {
    const shadows = report.shadows || [];
    if (shadows.length === 0) {
      empty(container, stage === 'live' ? 'No shadow version beside this live one.' : 'Shadow comparisons are in the live version’s report.');
      tableSlot.replaceChildren();
      return;
    }
    const rows = [];
    for (const sh of shadows) {
      for (const [name, key] of [['log loss', 'logLoss'], ['Brier', 'brier'], ['AUC', 'auc']]) {
        if (sh[key] && Number.isFinite(sh[key].difference)) rows.push({ version: sh.version, name, d: sh[key] });
      }
    }
    if (rows.length === 0) {
      empty(container, 'Not enough paired outcomes to compare yet.');
    } else {
      const span = Math.max(...rows.map((r) => Math.max(Math.abs(r.d.lower), Math.abs(r.d.upper), Math.abs(r.d.difference))).filter(Number.isFinite), 1e-6) * 1.15;
      const rowH = 28;
      const f = frame({ width: 560, height: 46 + rows.length * rowH, left: 170, top: 8, bottom: 38, x: [-span, span], y: [0, rows.length], yTicks: [],
        xTitle: 'difference (right of 0 favours the shadow)', label: 'Paired differences of the shadow versions against the live one' });
      f.svg.append(s('line', { class: 'zero', x1: f.px(0), x2: f.px(0), y1: f.top, y2: f.bottom }));
      rows.forEach((r, i) => {
        const y = f.top + 14 + i * rowH + 6;
        f.svg.append(
          s('text', { class: 'label-strong', x: f.left - 8, y: y + 4, 'text-anchor': 'end' }, `${r.version} · ${r.name}`),
          s('line', { class: 'diff-interval', x1: f.px.clamp(r.d.lower), x2: f.px.clamp(r.d.upper), y1: y, y2: y }),
          s('circle', { class: 'diff', cx: f.px.clamp(r.d.difference), cy: y, r: 5 },
            tip(`${r.version}, ${r.name}: live ${num(r.d.live, 4)}, shadow ${num(r.d.shadow, 4)}, difference ${num(r.d.difference, 4)} (interval ${num(r.d.lower, 4)} to ${num(r.d.upper, 4)}, p = ${num(r.d.p, 3)})`)));
      });
      container.replaceChildren(f.svg);
    }
    const words = { promote: 'promote', 'keep-live': 'keep live', undecided: 'undecided' };
    const pair = (d, digits) => (d ? `${num(d.live, digits)} → ${num(d.shadow, digits)}` : '–');
    tableSlot.replaceChildren(h('table', {},
      h('thead', {}, h('tr', {}, ['Shadow', 'Paired', 'Log loss', 'Brier', 'AUC', 'Recommendation'].map((c, i) => h('th', { scope: 'col', class: i === 1 ? 'num' : null }, c)))),
      h('tbody', {}, shadows.map((sh) => [
        h('tr', { 'data-shadow': sh.version },
          h('th', { scope: 'row', class: 'version-name' }, sh.version), h('td', { class: 'num' }, count(sh.paired)),
          h('td', {}, pair(sh.logLoss, 4)), h('td', {}, pair(sh.brier, 4)), h('td', {}, pair(sh.auc, 3)),
          h('td', {}, h('strong', { 'data-recommendation': sh.recommendation }, words[sh.recommendation] || sh.recommendation))),
        h('tr', { class: 'reasons' }, h('td', { colspan: '6' }, sh.reason))]))),
      h('p', { class: 'note' }, 'Live → shadow on the same rows.'));
  }

  // ---------------------------------------------------------------- the key

  function keyForm(onChange) {
    const form = $('key-form');
    const input = $('key-input');
    const state = $('key-state');
    const show = () => { state.textContent = sessionStorage.getItem(KEY) ? 'key in use (this tab)' : 'no key'; };
    form.addEventListener('submit', (e) => {
      e.preventDefault();
      const key = input.value.trim();
      if (key) sessionStorage.setItem(KEY, key); else sessionStorage.removeItem(KEY);
      input.value = '';
      show();
      onChange();
    });
    $('key-forget').addEventListener('click', () => { sessionStorage.removeItem(KEY); input.value = ''; show(); onChange(); });
    show();
  }

  function notice(error, what) {
    const box = $('notice');
    if (!error) { box.hidden = true; box.replaceChildren(); return; }
    box.hidden = false;
    box.replaceChildren(h('strong', {}, error.title), ` ${what}: ${error.message}.`,
      error.refused ? ' Enter an API key with the needed role at the top of the page.' : '');
  }

  // ---------------------------------------------------------------- the overview

  function overviewView() {
    const slot = $('overview');
    const render = (data) => {
      notice(null);
      $('judged-window').textContent = windowWord(data.judgedWindow) === 'all' ? 'all time' : windowWord(data.judgedWindow);
      slot.setAttribute('aria-busy', 'false');
      // Each update redraws the cards: keep the keyboard focus and the opened details where they were.
      const focused = slot.contains(document.activeElement) ? document.activeElement.dataset.key : null;
      const opened = [...slot.querySelectorAll('details[open]')].map((d) => d.dataset.key);
      if (data.models.length === 0) {
        slot.replaceChildren(h('p', { class: 'placeholder' }, 'No model is loaded. Put model files into the models folder; they load within seconds.'));
      } else {
        slot.replaceChildren(...data.models.map(modelCard));
      }
      const find = (key) => [...slot.querySelectorAll('[data-key]')].find((e) => e.dataset.key === key);
      for (const key of opened) { const d = find(key); if (d) d.open = true; }
      if (focused) { const e = find(focused); if (e) e.focus(); }
      slot.dataset.renders = String(Number(slot.dataset.renders || 0) + 1);
      if (data.loadErrors.length > 0) {
        slot.append(h('section', { class: 'card' }, h('h2', {}, 'Files that did not load'),
          h('ul', {}, data.loadErrors.map((e) => h('li', {}, h('span', { class: 'version-name' }, e.file), ': ', e.problems.map((p) => `${p.path}: ${p.reason}`).join('; '))))));
      }
      document.body.dataset.state = 'ready';
    };
    const stream = follow(() => '/v1/overview/events', (kind, data) => render(data), (e) => {
      slot.setAttribute('aria-busy', 'false');
      slot.replaceChildren();
      notice(e, 'The service did not give the overview');
      document.body.dataset.state = 'refused';
      if (e.refused) $('key-input').focus();
    });
    keyForm(() => stream.restart());
    stream.restart();
  }

  // The last change of status: to what, from what, when, and its reasons then when they differ from the reasons now.
  function lastChange(v) {
    const c = v.lastChange;
    const key = `${v.model}|${v.version}`;
    const then = c.reasons.join('\n') !== (v.reasons || []).join('\n') && c.reasons.length > 0
      ? h('details', { 'data-key': `details|${key}` }, h('summary', { 'data-key': `summary|${key}` }, 'reasons at the change'),
        h('ul', {}, c.reasons.map((r) => h('li', {}, r)))) : null;
    return [statusWords(c.to).word, c.from ? ` (was ${statusWords(c.from).word})` : ' (first report since start)', h('br'), when(c.at), then];
  }

  function modelCard(m) {
    const active = m.versions.filter((v) => v.stage !== 'retired');
    const retired = m.versions.filter((v) => v.stage === 'retired');
    const link = `/models/${encodeURIComponent(m.model)}`;
    const body = [];
    for (const v of active) {
      body.push(h('tr', { 'data-version': v.version, 'data-stage': v.stage },
        h('th', { scope: 'row' }, h('span', { class: 'version-name' }, v.version)),
        h('td', {}, h('span', { class: `stage ${v.stage}` }, v.stage)),
        h('td', {}, chip(v.status)),
        h('td', { class: 'num' }, count(v.scoredLastHour), h('br'), h('span', { class: 'note' }, `${count(v.scored24h)} in 24 h`)),
        h('td', { class: 'num', 'data-labelled': String(v.labelled ?? '') }, count(v.labelled), h('br'), h('span', { class: 'note' }, `${count(v.immature)} immature`)),
        h('td', { class: 'num', 'data-events': String(v.events ?? '') }, count(v.events)),
        h('td', {}, v.lastChange ? lastChange({ ...v, model: m.model }) : '–')));
      const reasons = v.reasons || [];
      if (reasons.length > 0) {
        body.push(h('tr', { class: 'reasons' }, h('td', { colspan: '7' }, h('ul', {}, reasons.map((r) => h('li', {}, r))))));
      }
    }
    return h('section', { class: 'card', 'data-model': m.model, 'aria-labelledby': `model-${m.model}` },
      h('div', { class: 'card-head' }, h('h2', { id: `model-${m.model}` }, h('a', { href: link, 'data-key': `name|${m.model}` }, m.model)),
        h('span', { class: 'meta' }, `${m.link} link · outcome: ${m.outcome} · horizon ${m.horizon}`)),
      h('p', { class: 'desc' }, firstSentence(m.description)),
      h('table', {},
        h('caption', { class: 'sr-only' }, `Versions of ${m.model}`),
        h('thead', {}, h('tr', {}, ['Version', 'Stage', 'Status', 'Scored, last hour', 'Labelled', 'Events', 'Last status change'].map((c, i) =>
          h('th', { scope: 'col', class: i >= 3 && i <= 5 ? 'num' : null }, c)))),
        h('tbody', {}, body)),
      retired.length > 0 ? h('p', { class: 'retired' }, `Retired: ${retired.map((v) => v.version).join(', ')}`) : null,
      h('a', { class: 'open', href: link, 'data-key': `open|${m.model}` }, `Open ${m.model} →`));
  }

  // ---------------------------------------------------------------- a model

  function modelView() {
    const model = decodeURIComponent(location.pathname.replace(/^\/models\//, '').replace(/\/$/, ''));
    const query = new URLSearchParams(location.search);
    const state = { model, version: query.get('version') || '', window: query.get('window') || '', overview: null, entry: null, report: null, trendKey: '', loading: null };
    document.title = `${model} · Scorer`;
    $('crumb-model').textContent = model;
    $('model-name').textContent = model;

    const monitorPath = () => {
      const q = new URLSearchParams();
      if (state.version) q.set('version', state.version);
      if (state.window) q.set('window', state.window);
      return `/v1/models/${encodeURIComponent(model)}/monitor/events?${q}`;
    };

    // A change of status shows whichever event brings it first: the "status" event, or a refresh's snapshot.
    const stream = follow(monitorPath, (kind, report) => {
      const previous = state.report;
      state.report = report;
      notice(null);
      renderReport();
      if (previous && previous.version === report.version && previous.status !== report.status) announce(previous, report);
      refreshSeries();
    }, (e) => {
      notice(e, 'The service did not give the report');
      document.body.dataset.state = 'refused';
      if (e.refused) $('key-input').focus();
    });

    function announce(previous, report) {
      const box = $('change');
      const from = statusWords(previous.status).word;
      const to = statusWords(report.status).word;
      box.hidden = false;
      box.dataset.to = report.status;
      box.replaceChildren(h('strong', {}, `Status changed: ${from} → ${to}`), ` at ${clock(new Date())}. `, (report.reasons || []).join(' '));
    }

    async function loadOverview() {
      try {
        state.overview = await api('/v1/overview');
      } catch (e) {
        notice(e, 'The service did not give the list of versions');
        document.body.dataset.state = 'refused';
        if (e.refused) $('key-input').focus();
        return false;
      }
      state.entry = state.overview.models.find((m) => m.model === model) || null;
      if (!state.entry) {
        notice(new ApiError(404, `no model '${model}' is loaded`), 'This model');
        return false;
      }
      if (!state.window) state.window = state.overview.defaultWindow;
      $('model-description').textContent = state.entry.description;
      renderControls();
      renderActions();
      return true;
    }

    function renderControls() {
      const select = $('version');
      select.replaceChildren(...state.entry.versions.map((v) => h('option', { value: v.version, selected: (state.version || state.entry.live) === v.version },
        `${v.version} (${v.stage})`)));
      if (!state.version && !state.entry.live) state.version = select.value;
      const set = $('windows');
      const legend = set.querySelector('legend');
      const seg = h('div', { class: 'seg' });
      for (const w of state.overview.windows) {
        const id = `window-${w}`;
        seg.append(h('input', { type: 'radio', name: 'window', id, value: w, checked: w === state.window }), h('label', { for: id }, windowWord(w)));
      }
      set.replaceChildren(legend, seg);
      $('window-note').textContent = `Status judged over ${windowWord(state.overview.judgedWindow)}; updates every ${duration(state.overview.reportIntervalSeconds)}.`;
    }

    function select() {
      const q = new URLSearchParams();
      if (state.version) q.set('version', state.version);
      q.set('window', state.window);
      history.replaceState(null, '', `${location.pathname}?${q}`);
      state.report = null;
      state.trendKey = '';
      $('change').hidden = true;
      stream.restart();
    }

    $('version').addEventListener('change', (e) => { state.version = e.target.value; select(); renderActions(); });
    $('windows').addEventListener('change', (e) => { if (e.target.name === 'window') { state.window = e.target.value; select(); } });
    $('controls').addEventListener('submit', (e) => e.preventDefault());

    function currentVersion() {
      return state.entry ? state.entry.versions.find((v) => v.version === (state.version || state.entry.live)) : null;
    }

    function renderReport() {
      const r = state.report;
      $('status-slot').replaceChildren(chip(r.status, true), h('span', { class: 'service-name' }, `${r.version} (${r.stage})`));
      const figure = (label, value, small) => h('div', {}, h('dt', {}, label), h('dd', {}, value, small ? h('small', {}, small) : null));
      const level = `${Math.round((r.level || 0.95) * 100)}%`;
      $('figures').replaceChildren(
        figure('Labelled', count(r.labelled), `${count(r.immature)} immature${r.provisional ? ' · provisional' : ''}`),
        figure('Events', count(r.events), `expected ${num(r.expected, 1)}`),
        figure('Observed / expected', r.observedExpected ? num(r.observedExpected.estimate) : '–', r.observedExpected ? `${level}: ${interval(r.observedExpected)}` : 'not estimable'),
        figure('Calibration slope', r.calibrationSlope ? num(r.calibrationSlope.estimate) : '–', r.calibrationSlope ? `${level}: ${interval(r.calibrationSlope)}` : 'not estimable'),
        figure('Calibration intercept', r.calibrationIntercept ? num(r.calibrationIntercept.estimate) : '–', r.calibrationIntercept ? `${level}: ${interval(r.calibrationIntercept)}` : 'not estimable'),
        figure('AUC', r.auc ? num(r.auc.estimate) : '–', r.auc ? `${level}: ${interval(r.auc)}` : 'not estimable'),
        figure('Brier', num(r.brier, 4), r.ece !== undefined ? `ECE ${num(r.ece, 4)}` : ''),
        figure('EWMA O − E', r.ewma && r.ewma.limit > 0 ? num(r.ewma.value, 4) : '–',
          r.ewma && r.ewma.limit > 0 ? `limit ±${num(r.ewma.limit, 4)}${r.ewma.outOfControl ? ' · beyond' : ''}` : 'no matured outcome yet'));
      $('reasons').replaceChildren(...(r.reasons || []).map((x) => h('li', {}, x)));
      $('advice').textContent = r.advice || '';
      reliabilityChart($('chart-reliability'), r);
      reliabilityTable($('table-reliability'), r);
      psiChart($('chart-psi'), r, state.overview);
      shadowChart($('chart-shadows'), $('table-shadows'), r, r.stage);
      document.body.dataset.state = 'ready';
    }

    // The trend and the CUSUM paths change only when outcomes do: fetch them again then.
    async function refreshSeries() {
      const r = state.report;
      const steps = r.cusum && r.cusum.up ? r.cusum.up.steps : 0;
      const key = `${r.version}|${r.window}|${r.labelled}|${r.events}|${steps}`;
      if (key === state.trendKey || state.loading) return;
      state.trendKey = key;
      const q = new URLSearchParams({ version: r.version, window: r.window });
      state.loading = Promise.all([
        api(`/v1/models/${encodeURIComponent(model)}/monitor/trend?${q}`),
        api(`/v1/models/${encodeURIComponent(model)}/monitor/cusum?${q}`),
      ]).then(([trend, paths]) => {
        trendChart($('chart-intercept'), trend, 'calibrationIntercept', { title: 'calibration intercept', reference: 0 });
        trendChart($('chart-slope'), trend, 'calibrationSlope', { title: 'calibration slope', reference: 1 });
        trendChart($('chart-auc'), trend, 'auc', { title: 'AUC', reference: 0.5, floor: trend.aucFloor, floorLabel: `floor ${num(trend.aucFloor, 2)}`, fixed: [0.3, 1] });
        $('trend-note').textContent = `Buckets of ${duration(trend.stepSeconds)}; a point needs events and non-events in its bucket.`;
        cusumChart($('chart-cusum'), $('cusum-note'), paths);
      }).catch((e) => {
        if (e instanceof ApiError) notice(e, 'The service did not give the trends');
      }).finally(() => {
        state.loading = null;
        if (state.report && state.trendKey !== `${state.report.version}|${state.report.window}|${state.report.labelled}|${state.report.events}|${state.report.cusum && state.report.cusum.up ? state.report.cusum.up.steps : 0}`) refreshSeries();
      });
    }

    // ------------------------------------------------ actions

    function renderActions() {
      const slot = $('action-buttons');
      slot.replaceChildren();
      if (!state.entry) return;
      const live = state.entry.versions.find((v) => v.stage === 'live');
      for (const v of state.entry.versions.filter((x) => x.stage === 'shadow')) {
        slot.append(h('button', { type: 'button', class: 'primary', 'data-action': 'promote', 'data-version': v.version }, `Promote ${v.version} to live`));
      }
      if (live) slot.append(h('button', { type: 'button', 'data-action': 'rollback' }, `Roll back ${live.version}`));
      const target = currentVersion();
      if (target && target.stage !== 'retired') {
        slot.append(h('button', { type: 'button', 'data-action': 'recalibrate', 'data-version': target.version }, `Request a recalibrated candidate of ${target.version}`));
      }
    }

    $('action-buttons').addEventListener('click', async (e) => {
      const button = e.target.closest('button[data-action]');
      if (!button) return;
      const action = button.dataset.action;
      const version = button.dataset.version;
      const live = state.entry.versions.find((v) => v.stage === 'live');
      const texts = {
        promote: [`Promote ${version}?`, `${version} will answer every score request of ${model}${live ? `; ${live.version} will be retired` : ''}. Roll back restores the previous live version.`],
        rollback: [`Roll back ${live ? live.version : ''}?`, `The previous live version of ${model} comes back and ${live ? live.version : 'the current one'} is retired.`],
        recalibrate: [`Recalibrate ${version}?`, `A recalibrated candidate is fitted on the outcomes of the ${windowWord(state.window)} window and written to the models folder, where it loads as a shadow version. Nothing changes what is served until it is promoted. With too little evidence for a change, nothing is written.`],
      };
      if (!(await confirmed(...texts[action], button))) return;
      const path = {
        promote: `/v1/models/${encodeURIComponent(model)}/versions/${encodeURIComponent(version)}/stage`,
        rollback: `/v1/models/${encodeURIComponent(model)}/rollback`,
        recalibrate: `/v1/models/${encodeURIComponent(model)}/versions/${encodeURIComponent(version)}/recalibrate`,
      }[action];
      const body = { promote: { stage: 'live' }, rollback: {}, recalibrate: { window: state.window, kind: 'auto' } }[action];
      const result = $('action-result');
      result.hidden = false;
      result.dataset.outcome = 'pending';
      result.textContent = 'Sending…';
      button.disabled = true;
      try {
        const answer = await api(path, { method: 'POST', body });
        result.dataset.outcome = 'ok';
        result.replaceChildren(h('strong', {}, 'Done.'), describe(action, answer, version));
        if (action !== 'recalibrate') state.version = ''; // show the live version, whichever it is now
        await loadOverview();
        if (action !== 'recalibrate') select();
      } catch (err) {
        result.dataset.outcome = err instanceof ApiError && err.refused ? 'refused' : 'failed';
        result.replaceChildren(h('strong', {}, err instanceof ApiError ? err.title : 'Failed'), ` ${err.message}`,
          err instanceof ApiError && err.refused ? ' — enter a key with the admin role at the top of the page.' : '');
      } finally {
        button.disabled = false;
      }
    });

    function describe(action, answer, version) {
      if (action === 'recalibrate') {
        return answer.written
          ? ` Wrote ${answer.newVersion} (${answer.kind}, file ${answer.file}) from ${count(answer.rows)} labelled predictions; it loads as a shadow version. ${answer.reason}`
          : ` Nothing written: ${answer.reason}`;
      }
      const changes = (answer.changes || []).map((c) => `${c.version}: ${c.from || 'new'} → ${c.to}`).join('; ');
      const now = answer.live || (answer.changes || []).find((c) => c.to === 'live')?.version || version;
      return ` ${now} is now live${changes ? ` (${changes})` : ''}.`;
    }

    function confirmed(title, text, opener) {
      const dialog = $('confirm');
      $('confirm-title').textContent = title;
      $('confirm-text').textContent = text;
      return new Promise((resolve) => {
        const ok = $('confirm-ok');
        const cancel = $('confirm-cancel');
        const done = (value) => {
          ok.removeEventListener('click', yes);
          cancel.removeEventListener('click', no);
          dialog.removeEventListener('close', no);
          if (dialog.open) dialog.close();
          opener.focus();
          resolve(value);
        };
        const yes = () => done(true);
        const no = () => done(false);
        ok.addEventListener('click', yes);
        cancel.addEventListener('click', no);
        dialog.addEventListener('close', no);
        dialog.showModal();
        cancel.focus();
      });
    }

    keyForm(async () => { notice(null); if (await loadOverview()) stream.restart(); });
    loadOverview().then((ok) => { if (ok) stream.restart(); });
  }

  function duration(seconds) {
    if (seconds < 60) return `${+seconds.toPrecision(3)} s`;
    if (seconds < 3600) return `${seconds / 60} min`;
    if (seconds < 86400) return `${seconds / 3600} h`;
    return `${seconds / 86400} days`;
  }

  document.addEventListener('DOMContentLoaded', () => {
    if (document.body.dataset.view === 'overview') overviewView();
    else if (document.body.dataset.view === 'model') modelView();
  });
})();
