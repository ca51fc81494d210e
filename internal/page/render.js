'use strict';
// Renderers and the spatial index of the nightjar map page. A renderer
// draws the points of a view: positions in map units, one RGBA colour per
// point (alpha 0 = hidden), a drawing order (reference rows first).

// njWebGL returns a WebGL renderer on canvas, or null when the browser has
// no WebGL.
function njWebGL(canvas) {
  const opts = { antialias: false, alpha: false, depth: false, stencil: false, preserveDrawingBuffer: true, premultipliedAlpha: false };
  let gl = null;
  try { gl = canvas.getContext('webgl', opts) || canvas.getContext('experimental-webgl', opts); } catch (e) { gl = null; }
  if (!gl) return null;
  const vs = 'attribute vec2 p; attribute vec4 c; uniform vec2 centre; uniform vec2 k; uniform float size; varying vec3 v;\n' +
    'void main() {\n' +
    '  if (c.a < 0.5) { gl_Position = vec4(2.0, 2.0, 2.0, 1.0); gl_PointSize = 1.0; return; }\n' +
    '  gl_Position = vec4((p - centre) * k, 0.0, 1.0); gl_PointSize = size; v = c.rgb;\n' +
    '}';
  const fs = 'precision mediump float; varying vec3 v; uniform float alpha; uniform float disc;\n' +
    'void main() {\n' +
    '  vec2 d = gl_PointCoord - vec2(0.5);\n' +
    '  if (disc > 0.5 && dot(d, d) > 0.25) discard;\n' +
    '  gl_FragColor = vec4(v, alpha);\n' +
    '}';
  function shader(type, src) {
    const s = gl.createShader(type);
    gl.shaderSource(s, src);
    gl.compileShader(s);
    if (!gl.getShaderParameter(s, gl.COMPILE_STATUS)) throw new Error('WebGL shader: ' + gl.getShaderInfoLog(s));
    return s;
  }
  let prog;
  try {
    prog = gl.createProgram();
    gl.attachShader(prog, shader(gl.VERTEX_SHADER, vs));
    gl.attachShader(prog, shader(gl.FRAGMENT_SHADER, fs));
    gl.linkProgram(prog);
    if (!gl.getProgramParameter(prog, gl.LINK_STATUS)) throw new Error('WebGL program: ' + gl.getProgramInfoLog(prog));
  } catch (e) {
    console.warn('nightjar: WebGL is there but cannot draw (' + e.message + '); using the canvas fallback');
    return null;
  }
  gl.useProgram(prog);
  const loc = {
    p: gl.getAttribLocation(prog, 'p'), c: gl.getAttribLocation(prog, 'c'),
    centre: gl.getUniformLocation(prog, 'centre'), k: gl.getUniformLocation(prog, 'k'),
    size: gl.getUniformLocation(prog, 'size'), alpha: gl.getUniformLocation(prog, 'alpha'), disc: gl.getUniformLocation(prog, 'disc'),
  };
  const posBuf = gl.createBuffer(), colBuf = gl.createBuffer();
  let n = 0, order = null, scratch = null;
  const maxSize = gl.getParameter(gl.ALIASED_POINT_SIZE_RANGE)[1];
  return {
    name: 'WebGL',
    setPositions(x, y, ord) {
      n = x.length; order = ord;
      const xy = new Float32Array(2 * n);
      for (let j = 0; j < n; j++) { const i = ord ? ord[j] : j; xy[2 * j] = x[i]; xy[2 * j + 1] = y[i]; }
      gl.bindBuffer(gl.ARRAY_BUFFER, posBuf);
      gl.bufferData(gl.ARRAY_BUFFER, xy, gl.STATIC_DRAW);
      gl.enableVertexAttribArray(loc.p);
      gl.vertexAttribPointer(loc.p, 2, gl.FLOAT, false, 0, 0);
    },
    setColours(rgba) {
      let data = rgba;
      if (order) {
        if (!scratch) scratch = new Uint32Array(n);
        const src = new Uint32Array(rgba.buffer, rgba.byteOffset, n);
        for (let j = 0; j < n; j++) scratch[j] = src[order[j]];
        data = new Uint8Array(scratch.buffer);
      }
      gl.bindBuffer(gl.ARRAY_BUFFER, colBuf);
      gl.bufferData(gl.ARRAY_BUFFER, data, gl.DYNAMIC_DRAW);
      gl.enableVertexAttribArray(loc.c);
      gl.vertexAttribPointer(loc.c, 4, gl.UNSIGNED_BYTE, true, 0, 0);
    },
    draw(v, size, alpha, dpr, finish) {
      const w = gl.drawingBufferWidth, h = gl.drawingBufferHeight;
      gl.viewport(0, 0, w, h);
      gl.clearColor(1, 1, 1, 1);
      gl.clear(gl.COLOR_BUFFER_BIT);
      gl.enable(gl.BLEND);
      gl.blendFuncSeparate(gl.SRC_ALPHA, gl.ONE_MINUS_SRC_ALPHA, gl.ZERO, gl.ONE);
      gl.uniform2f(loc.centre, v.cx, v.cy);
      gl.uniform2f(loc.k, 2 * v.s / v.W, 2 * v.s / v.H);
      const px = Math.min(maxSize, Math.max(1, size * dpr));
      gl.uniform1f(loc.size, px);
      gl.uniform1f(loc.alpha, alpha);
      gl.uniform1f(loc.disc, px >= 3 ? 1 : 0);
      if (n > 0) gl.drawArrays(gl.POINTS, 0, n);
      if (finish) gl.finish();
    },
  };
}

// njCanvas returns the canvas 2D renderer: points blended one by one into
// an image of the canvas's pixels.
function njCanvas(canvas) {
  const ctx = canvas.getContext('2d');
  let x = null, y = null, order = null, rgba = null, img = null;
  return {
    name: 'canvas 2D',
    setPositions(px, py, ord) { x = px; y = py; order = ord; },
    setColours(c) { rgba = c; },
    draw(v, size, alpha, dpr) {
      const w = canvas.width, h = canvas.height;
      if (!img || img.width !== w || img.height !== h) img = ctx.createImageData(w, h);
      const d = img.data;
      d.fill(255);
      const k = v.s * dpr, ox = w / 2 - v.cx * k, oy = h / 2 + v.cy * k;
      const r = Math.max(0, Math.round(size * dpr / 2 - 0.5));
      const offs = [];
      for (let dy = -r; dy <= r; dy++) for (let dx = -r; dx <= r; dx++) if (dx * dx + dy * dy <= r * r + r) offs.push(dx, dy);
      const a = Math.round(alpha * 256), n = x.length;
      for (let j = 0; j < n; j++) {
        const i = order ? order[j] : j;
        if (rgba[4 * i + 3] === 0) continue;
        const cx = Math.round(ox + x[i] * k), cy = Math.round(oy - y[i] * k);
        if (cx < -r || cy < -r || cx >= w + r || cy >= h + r) continue;
        const cr = rgba[4 * i], cg = rgba[4 * i + 1], cb = rgba[4 * i + 2];
        for (let o = 0; o < offs.length; o += 2) {
          const px = cx + offs[o], py = cy + offs[o + 1];
          if (px < 0 || py < 0 || px >= w || py >= h) continue;
          const p = 4 * (py * w + px);
          d[p] += ((cr - d[p]) * a) >> 8;
          d[p + 1] += ((cg - d[p + 1]) * a) >> 8;
          d[p + 2] += ((cb - d[p + 2]) * a) >> 8;
        }
      }
      ctx.putImageData(img, 0, 0);
    },
  };
}

// njGrid builds a uniform grid over the points' bounding box (about two
// points per cell, at most 2048×2048 cells) by counting sort: the points of
// cell c are items[start[c] .. start[c+1]). nearest(px, py, r, ok) returns
// the point nearest (px, py) within distance r (map units) for which ok(i)
// holds, or −1; it visits only the cells the circle touches.
function njGrid(x, y, b) {
  const n = x.length;
  const g = Math.max(1, Math.min(2048, Math.ceil(Math.sqrt(n / 2))));
  const w = (b[2] - b[0]) || 1, h = (b[3] - b[1]) || 1;
  const cw = w / g, ch = h / g;
  const col = (v) => Math.min(g - 1, Math.max(0, Math.floor((v - b[0]) / cw)));
  const row = (v) => Math.min(g - 1, Math.max(0, Math.floor((v - b[1]) / ch)));
  const cell = new Uint32Array(n), start = new Uint32Array(g * g + 1);
  for (let i = 0; i < n; i++) { const c = row(y[i]) * g + col(x[i]); cell[i] = c; start[c + 1]++; }
  for (let c = 0; c < g * g; c++) start[c + 1] += start[c];
  const fillAt = start.slice(0, g * g), items = new Uint32Array(n);
  for (let i = 0; i < n; i++) items[fillAt[cell[i]]++] = i;
  return {
    cells: g,
    nearest(px, py, r, ok) {
      const c0 = col(px - r), c1 = col(px + r), r0 = row(py - r), r1 = row(py + r);
      let best = -1, bestD = r * r;
      for (let rr = r0; rr <= r1; rr++) {
        for (let cc = c0; cc <= c1; cc++) {
          const c = rr * g + cc;
          for (let k = start[c]; k < start[c + 1]; k++) {
            const i = items[k], dx = x[i] - px, dy = y[i] - py, d = dx * dx + dy * dy;
            if (d <= bestD && ok(i)) { best = i; bestD = d; }
          }
        }
      }
      return best;
    },
  };
}
