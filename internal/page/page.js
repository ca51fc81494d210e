// The nightjar map page: unpacks the embedded rows, draws them, and answers
// pan, zoom, hover, legend and find. Every text that comes from the data (ids,
// labels, titles) goes into the page through textContent, never as markup.
(function () {
  const $ = (id) => document.getElementById(id);
  const NJ = window.nightjar = { ready: false, renderer: '', firstFrameMs: NaN, hoverMs: [], errors: [], marks: {} };
  const mark = (name) => { NJ.marks[name] = performance.now(); };
  window.addEventListener('error', (e) => NJ.errors.push(String(e.message)));
  const MARGIN = 24; // CSS pixels around the map at the first view

  const fmt = new Intl.NumberFormat('en-GB');
  const count = (k) => fmt.format(k);
  function num(v) {
    if (!Number.isFinite(v)) return 'no value';
    const a = Math.abs(v);
    if (v === 0) return '0';
    if (a >= 1e7 || a < 1e-3) return v.toExponential(2);
    if (a >= 100) return String(Math.round(v));
    return String(Number(v.toPrecision(4)));
  }
  function el(tag, cls, text) {
    const e = document.createElement(tag);
    if (cls) e.className = cls;
    if (text !== undefined) e.textContent = text;
    return e;
  }
  function rgb(hex) { return [parseInt(hex.slice(1, 3), 16), parseInt(hex.slice(3, 5), 16), parseInt(hex.slice(5, 7), 16)]; }

  async function unpack(meta) {
    const text = $('nj-data').textContent.trim();
    if (typeof DecompressionStream === 'undefined') throw new Error('this browser has no DecompressionStream (it needs Chrome 80, Firefox 113, Safari 16.4 or later)');
    let bytes;
    if (typeof Uint8Array.fromBase64 === 'function') {
      bytes = Uint8Array.fromBase64(text);
    } else {
      const s = atob(text);
      bytes = new Uint8Array(s.length);
      for (let i = 0; i < s.length; i++) bytes[i] = s.charCodeAt(i);
    }
    const stream = new Blob([bytes]).stream().pipeThrough(new DecompressionStream('gzip'));
    const buf = await new Response(stream).arrayBuffer();
    if (buf.byteLength !== meta.bytes) throw new Error('the page data are damaged (' + buf.byteLength + ' bytes, want ' + meta.bytes + ')');
    const kinds = { f32: Float32Array, f64: Float64Array, u8: Uint8Array, u16: Uint16Array, u32: Uint32Array };
    const d = {};
    for (const s of meta.sections) d[s.name] = new kinds[s.type](buf, s.offset, s.len);
    return d;
  }

  // The state of the page.
  const S = { meta: null, d: null, n: 0, view: null, fit: null, r: null, grid: null, rgba: null,
    hidden: null, hideRef: false, only: -1, size: 0, alpha: 0, auto: true, dirty: false, first: true, mark: -1,
    idOff: null, enc: new TextEncoder(), dec: new TextDecoder() };

  // group returns row i's legend index: 0 for no value, g+1 for group g.
  const group = (i) => S.d.codes ? S.d.codes[i] : 0;
  const isRef = (i) => S.d.placed ? S.d.placed[i] === 0 : false;
  function visible(i) {
    if (isRef(i)) return !S.hideRef;
    if (S.d.codes) return !S.hidden[S.d.codes[i]];
    if (S.d.values) return !(S.hidden[0] && !Number.isFinite(S.d.values[i]));
    return true;
  }

  function colours() {
    const m = S.meta, d = S.d, n = S.n;
    const out = S.rgba || (S.rgba = new Uint8Array(4 * n));
    const miss = rgb(m.missing), ref = rgb(m.reference), plain = rgb(m.plain);
    const table = m.groups.map((g) => rgb(g.colour));
    const ramp = m.scale ? m.scale.ramp.map(rgb) : null;
    for (let i = 0; i < n; i++) {
      let c = plain;
      if (isRef(i)) c = ref;
      else if (d.codes) c = d.codes[i] ? table[d.codes[i] - 1] : miss;
      else if (ramp) {
        const v = d.values[i];
        if (!Number.isFinite(v)) c = miss;
        else {
          const s = m.scale, t = s.hi > s.lo ? Math.min(1, Math.max(0, (v - s.lo) / (s.hi - s.lo))) : 0.5;
          c = ramp[Math.round(t * (ramp.length - 1))];
        }
      }
      out[4 * i] = c[0]; out[4 * i + 1] = c[1]; out[4 * i + 2] = c[2]; out[4 * i + 3] = visible(i) ? 255 : 0;
    }
    S.r.setColours(out);
    redraw();
  }

  // The view: map point (x, y) is drawn at CSS pixel
  // (W/2 + (x − cx)·s, H/2 − (y − cy)·s) of the map area (see the help).
  function fitView(W, H) {
    const b = S.meta.bounds;
    let s = Math.min((W - 2 * MARGIN) / (b[2] - b[0]), (H - 2 * MARGIN) / (b[3] - b[1]));
    if (!Number.isFinite(s) || s <= 0) s = 1;
    return { cx: (b[0] + b[2]) / 2, cy: (b[1] + b[3]) / 2, s, W, H };
  }
  const toScreen = (x, y) => [S.view.W / 2 + (x - S.view.cx) * S.view.s, S.view.H / 2 - (y - S.view.cy) * S.view.s];
  const fromScreen = (u, v) => [S.view.cx + (u - S.view.W / 2) / S.view.s, S.view.cy - (v - S.view.H / 2) / S.view.s];
  const zoom = () => S.view.s / S.fit.s;

  function autoSize() {
    const n = S.n;
    const base = n <= 5000 ? 7 : n <= 20000 ? 5 : n <= 150000 ? 3 : n <= 1000000 ? 2 : 1.5;
    return base * Math.min(4, Math.max(1, Math.sqrt(zoom())));
  }
  function autoAlpha(size) {
    const cover = (S.n / Math.max(1, zoom() * zoom())) * Math.PI * (size / 2) * (size / 2) / (S.view.W * S.view.H);
    return Math.min(0.9, Math.max(0.1, 0.8 / Math.sqrt(Math.max(cover, 1e-9))));
  }

  function redraw() {
    if (S.dirty) return;
    S.dirty = true;
    requestAnimationFrame(frame);
  }
  function frame() {
    S.dirty = false;
    const size = S.auto ? autoSize() : S.size;
    const alpha = S.auto ? autoAlpha(size) : S.alpha;
    if (S.auto) { $('nj-size').value = size; $('nj-alpha').value = alpha; }
    S.r.draw(S.view, size, alpha, window.devicePixelRatio || 1, S.first);
    S.lastSize = size;
    placeRing();
    if (S.first) {
      S.first = false;
      NJ.firstFrameMs = performance.now();
      // The hover index is built after the first frame, which does not need it.
      S.grid = njGrid(S.d.x, S.d.y, S.meta.bounds);
      mark('indexed');
      NJ.ready = true;
      document.body.dataset.ready = '1';
    }
  }

  function resize() {
    const st = $('nj-stage'), cv = $('nj-canvas');
    const W = st.clientWidth, H = st.clientHeight, dpr = window.devicePixelRatio || 1;
    if (S.view && W === S.view.W && H === S.view.H && cv.width === Math.max(1, Math.round(W * dpr))) return;
    cv.width = Math.max(1, Math.round(W * dpr));
    cv.height = Math.max(1, Math.round(H * dpr));
    const f = fitView(W, H);
    if (!S.view) S.view = f;
    else { S.view.s *= f.s / S.fit.s; S.view.W = W; S.view.H = H; }
    S.fit = f;
    NJ.view = S.view;
    redraw();
  }

  // ---- hover ----
  function idOf(i) {
    if (!S.d.idText) return '';
    if (!S.idOff) {
      const L = S.d.idLengths, off = new Float64Array(S.n + 1);
      for (let k = 0; k < S.n; k++) off[k + 1] = off[k] + L[k];
      S.idOff = off;
    }
    return S.dec.decode(S.d.idText.subarray(S.idOff[i], S.idOff[i + 1]));
  }
  const inputRow = (i) => (S.d.rows ? S.d.rows[i] : i) + 1;
  function describe(i) {
    const m = S.meta, lines = [];
    lines.push(['nj-tip-id', S.d.idText ? idOf(i) : 'row ' + count(inputRow(i))]);
    const head = m.heading || 'label';
    // A reference row of a placement is not coloured: it has no value here.
    if (isRef(i)) { /* no label line */ }
    else if (S.d.codes) lines.push(['', head + ': ' + (S.d.codes[i] ? m.groups[S.d.codes[i] - 1].label : 'no value')]);
    else if (S.d.values) lines.push(['', head + ': ' + num(S.d.values[i])]);
    if (S.d.placed) lines.push(['nj-tip-soft', S.d.placed[i] ? 'placed row' : 'reference row']);
    lines.push(['nj-tip-soft', 'map: ' + num(S.d.x[i]) + ', ' + num(S.d.y[i])]);
    if (S.d.idText) lines.push(['nj-tip-soft', 'input row ' + count(inputRow(i))]);
    return lines;
  }
  function showTip(i, u, v) {
    const tip = $('nj-tip');
    tip.replaceChildren(...describe(i).map(([c, t]) => el('div', c, t)));
    tip.hidden = false;
    const W = S.view.W, H = S.view.H;
    const tw = tip.offsetWidth, th = tip.offsetHeight;
    tip.style.left = Math.min(u + 14, Math.max(0, W - tw - 4)) + 'px';
    tip.style.top = (v + 14 + th > H ? Math.max(0, v - th - 10) : v + 14) + 'px';
  }
  function hideTip() { $('nj-tip').hidden = true; }
  function hover(e) {
    if (!S.grid) return;
    const t0 = performance.now();
    const st = $('nj-stage').getBoundingClientRect();
    const u = e.clientX - st.left - S.stageBorder, v = e.clientY - st.top - S.stageBorder;
    const [x, y] = fromScreen(u, v);
    const radius = Math.max(5, (S.lastSize || 3) / 2 + 3) / S.view.s;
    const i = S.grid.nearest(x, y, radius, visible);
    if (i < 0) hideTip(); else showTip(i, u, v);
    const t1 = performance.now();
    NJ.hoverMs.push({ compute: t1 - t0, sinceEvent: t1 - e.timeStamp, row: i });
    if (NJ.hoverMs.length > 200) NJ.hoverMs.shift();
    NJ.lastHover = i;
  }

  // ---- the marker of a found row ----
  function placeRing() {
    const ring = $('nj-ring');
    if (S.mark < 0) { ring.hidden = true; return; }
    const [u, v] = toScreen(S.d.x[S.mark], S.d.y[S.mark]);
    ring.hidden = false;
    ring.style.left = u + 'px';
    ring.style.top = v + 'px';
  }

  // ---- pan and zoom ----
  function zoomAt(f, u, v) {
    const [x, y] = fromScreen(u, v);
    S.view.s = Math.min(S.fit.s * 1e5, Math.max(S.fit.s / 20, S.view.s * f));
    S.view.cx = x - (u - S.view.W / 2) / S.view.s;
    S.view.cy = y + (v - S.view.H / 2) / S.view.s;
    hideTip();
    redraw();
  }
  function pan(du, dv) { S.view.cx -= du / S.view.s; S.view.cy += dv / S.view.s; hideTip(); redraw(); }
  function home() { Object.assign(S.view, fitView(S.view.W, S.view.H)); S.mark = -1; hideTip(); redraw(); }

  function wire() {
    const st = $('nj-stage');
    S.stageBorder = st.clientLeft;
    const ptrs = new Map();
    let pinch = 0, moved = false;
    st.addEventListener('pointerdown', (e) => {
      if (e.button !== 0) return;
      st.setPointerCapture(e.pointerId);
      ptrs.set(e.pointerId, [e.clientX, e.clientY]);
      moved = false;
      if (ptrs.size === 2) { const [a, b] = [...ptrs.values()]; pinch = Math.hypot(a[0] - b[0], a[1] - b[1]); }
    });
    st.addEventListener('pointermove', (e) => {
      const p = ptrs.get(e.pointerId);
      if (!p) { hover(e); return; }
      const du = e.clientX - p[0], dv = e.clientY - p[1];
      ptrs.set(e.pointerId, [e.clientX, e.clientY]);
      if (ptrs.size === 1) {
        if (Math.abs(du) + Math.abs(dv) > 0) { moved = true; st.classList.add('nj-dragging'); pan(du, dv); }
      } else if (ptrs.size === 2) {
        const [a, b] = [...ptrs.values()], d = Math.hypot(a[0] - b[0], a[1] - b[1]);
        const r = st.getBoundingClientRect();
        if (pinch > 0) zoomAt(d / pinch, (a[0] + b[0]) / 2 - r.left, (a[1] + b[1]) / 2 - r.top);
        pinch = d; moved = true;
      }
    });
    const up = (e) => { ptrs.delete(e.pointerId); if (ptrs.size < 2) pinch = 0; st.classList.remove('nj-dragging'); if (!moved) hover(e); };
    st.addEventListener('pointerup', up);
    st.addEventListener('pointercancel', up);
    st.addEventListener('pointerleave', () => { if (!ptrs.size) hideTip(); });
    st.addEventListener('wheel', (e) => {
      e.preventDefault();
      const unit = e.deltaMode === 1 ? 16 : e.deltaMode === 2 ? 400 : 1;
      const dx = e.deltaX * unit, dy = e.deltaY * unit;
      if (e.shiftKey) { pan(-dy, -dx); return; }
      if (!e.ctrlKey && Math.abs(dx) > Math.abs(dy)) { pan(-dx, -dy); return; }
      const r = st.getBoundingClientRect();
      zoomAt(Math.exp(-dy * (e.ctrlKey ? 0.01 : 0.002)), e.clientX - r.left - S.stageBorder, e.clientY - r.top - S.stageBorder);
    }, { passive: false });
    st.addEventListener('dblclick', (e) => { const r = st.getBoundingClientRect(); zoomAt(2, e.clientX - r.left, e.clientY - r.top); });
    document.addEventListener('keydown', (e) => {
      if (e.key === 'Escape') { $('nj-help').hidden = true; S.mark = -1; hideTip(); redraw(); return; }
      if (e.target instanceof HTMLInputElement || e.ctrlKey || e.metaKey || e.altKey) return;
      const step = (e.shiftKey ? 0.5 : 0.12) * Math.min(S.view.W, S.view.H);
      const keys = {
        ArrowLeft: () => pan(step, 0), ArrowRight: () => pan(-step, 0), ArrowUp: () => pan(0, step), ArrowDown: () => pan(0, -step),
        '+': () => zoomAt(1.25, S.view.W / 2, S.view.H / 2), '=': () => zoomAt(1.25, S.view.W / 2, S.view.H / 2),
        '-': () => zoomAt(0.8, S.view.W / 2, S.view.H / 2), '0': home, '/': () => $('nj-find-input').focus(),
      };
      const f = keys[e.key];
      if (f) { e.preventDefault(); f(); }
    });
    new ResizeObserver(resize).observe(st);
    $('nj-help-open').addEventListener('click', () => { $('nj-help').hidden = !$('nj-help').hidden; });
    $('nj-help-close').addEventListener('click', () => { $('nj-help').hidden = true; });
    $('nj-find').addEventListener('submit', (e) => { e.preventDefault(); find($('nj-find-input').value); });
    const display = () => { S.auto = $('nj-auto').checked; S.size = +$('nj-size').value; S.alpha = +$('nj-alpha').value; redraw(); };
    $('nj-size').addEventListener('input', () => { $('nj-auto').checked = false; display(); });
    $('nj-alpha').addEventListener('input', () => { $('nj-auto').checked = false; display(); });
    $('nj-auto').addEventListener('change', display);
  }

  // ---- find ----
  function find(q) {
    q = q.trim();
    const msg = $('nj-find-msg');
    if (!q) { msg.textContent = ''; return; }
    let i = -1;
    if (S.d.idText) {
      const want = S.enc.encode(q), L = S.d.idLengths, T = S.d.idText;
      let off = 0;
      for (let k = 0; k < S.n && i < 0; k++) {
        const len = L[k];
        if (len === want.length) {
          let j = 0;
          while (j < len && T[off + j] === want[j]) j++;
          if (j === len) i = k;
        }
        off += len;
      }
    }
    const asRow = /^#?(\d+)$/.exec(q);
    if (i < 0 && asRow) {
      const r = Number(asRow[1]) - 1;
      if (S.d.rows) { for (let k = 0; k < S.n; k++) if (S.d.rows[k] === r) { i = k; break; } } else if (r >= 0 && r < S.n) i = r;
    }
    if (i < 0) {
      msg.textContent = (S.d.idText ? 'no row has the id “' : 'no row “') + q + '”' + (S.meta.total > S.n ? ' among the rows this page holds' : '');
      return;
    }
    if (!visible(i)) { S.hideRef = false; S.hidden[group(i)] = 0; S.only = -1; S.legend.refresh(); colours(); }
    S.view.cx = S.d.x[i];
    S.view.cy = S.d.y[i];
    S.view.s = Math.max(S.view.s, 4 * S.fit.s);
    S.mark = i;
    NJ.found = i;
    msg.textContent = 'found ' + (S.d.idText ? '“' + idOf(i) + '”, ' : '') + 'input row ' + count(inputRow(i)) + ' (centred)';
    redraw();
    showTip(i, S.view.W / 2, S.view.H / 2);
  }

  // boot unpacks the data, picks the renderer and builds the page; the
  // legend and the notes are in legend.js.
  async function boot() {
    mark('script');
    const m = S.meta = JSON.parse($('nj-meta').textContent);
    document.title = m.title;
    $('nj-title').textContent = m.title;
    $('nj-sub').textContent = m.subtitle;
    $('nj-caution').textContent = m.caution;
    $('nj-max').textContent = count(m.maxRows);
    S.d = await unpack(m);
    mark('unpacked');
    S.n = m.n;
    S.hidden = new Uint8Array(m.groups.length + 1);
    const cv = $('nj-canvas');
    const forced = new URLSearchParams(location.search).get('renderer') === 'canvas';
    S.r = forced ? null : njWebGL(cv);
    const why = forced ? 'forced by ?renderer=canvas' : 'this browser has no usable WebGL';
    if (!S.r) S.r = njCanvas(cv);
    NJ.renderer = S.r.name === 'WebGL' ? 'webgl' : 'canvas';
    let order = null;
    if (S.d.placed) {
      order = new Uint32Array(S.n);
      let k = 0;
      for (let i = 0; i < S.n; i++) if (!S.d.placed[i]) order[k++] = i;
      for (let i = 0; i < S.n; i++) if (S.d.placed[i]) order[k++] = i;
    }
    S.r.setPositions(S.d.x, S.d.y, order);
    mark('uploaded');
    S.auto = !(m.pointSize > 0 || m.opacity > 0);
    S.size = m.pointSize > 0 ? m.pointSize : 3;
    S.alpha = m.opacity > 0 ? m.opacity : 0.6;
    $('nj-auto').checked = S.auto;
    $('nj-size').value = S.size;
    $('nj-alpha').value = S.alpha;
    wire();
    resize();
    S.legend = njLegend(S, { el, count, num, colours });
    njNotes(S, { el, count }, S.r.name === 'WebGL' ? 'drawn with WebGL' : 'drawn with the canvas 2D fallback (' + why + ')');
    colours();
    mark('coloured');
    $('nj-loading').remove();
    NJ.toScreen = (i) => toScreen(S.d.x[i], S.d.y[i]);
    NJ.find = find;
  }

  boot().catch((e) => {
    const box = $('nj-loading');
    if (box) box.textContent = 'This map could not be shown: ' + e.message;
    console.error('nightjar:', e);
  });
})();
