"""The page :mod:`crystalview.exchange.html` writes: HTML, CSS and our own
WebGL2 script (no outside library), filled with one scene's data.

The script draws atoms as ray-cast sphere impostors (one instanced quad per
atom, exact silhouettes and depths in the orthographic view), sticks as
instanced cylinders, lines as screen-space quads (so widths hold on every
screen) and polyhedra / planes / arrows as triangle meshes, lit by the same
key, fill and head lights as the figures.
"""
from __future__ import annotations

import html
import json

CSS = r"""
html,body{margin:0;height:100%;overflow:hidden;background:BG;color:FG;
  font:14px/1.35 "DejaVu Sans","Segoe UI",Helvetica,Arial,sans-serif}
#cv-canvas{position:fixed;inset:0;width:100%;height:100%;display:block;touch-action:none;cursor:grab}
#cv-canvas:active{cursor:grabbing}
.cv-panel{position:fixed;background:rgba(255,255,255,.88);border:1px solid #d5d9de;border-radius:6px;
  padding:6px 8px;box-shadow:0 1px 3px rgba(0,0,0,.08)}
#cv-tools{left:8px;top:8px;max-width:230px}
#cv-tools h1{font-size:13px;margin:0 0 4px 0;font-weight:600}
#cv-tools .cv-row{display:flex;flex-wrap:wrap;gap:4px;margin:4px 0}
#cv-tools button{font:inherit;font-size:12px;padding:2px 6px;border:1px solid #aab3bc;border-radius:4px;
  background:#f3f5f7;color:FG;cursor:pointer}
#cv-tools button[aria-pressed="true"]{background:#2f5d8a;border-color:#2f5d8a;color:#fff}
#cv-tools button kbd{font:inherit;font-size:10px;opacity:.7;margin-left:3px}
#cv-tools .cv-help{font-size:11px;color:#4a5058;margin-top:4px}
#cv-legend{right:8px;top:8px;max-width:40%;max-height:60%;overflow:auto;font-size:13px}
#cv-legend ul{list-style:none;margin:0;padding:0}
#cv-legend li{display:flex;align-items:center;gap:6px;margin:2px 0;white-space:nowrap}
.cv-sw{flex:none;width:13px;height:13px;display:inline-block;box-sizing:border-box}
.cv-sw.ball{border-radius:50%}
.cv-sw.ring{border-radius:50%;background:transparent!important;border:2px solid currentColor}
.cv-sw.line{height:3px}
.cv-sw.arrow{height:3px;position:relative}
.cv-sw.arrow:after{content:"";position:absolute;right:-4px;top:-4px;border:5px solid transparent;
  border-left-color:inherit;border-left:6px solid}
.cv-sw.patch{opacity:.75}
.cv-sw.none{width:0}
#cv-bottom{left:8px;bottom:8px;max-width:calc(100% - 300px)}
#cv-caption div{font-size:12px}
#cv-scale{display:flex;align-items:center;gap:8px;margin-bottom:3px;font-size:12px}
#cv-scale-bar{height:6px;border:2px solid FG;border-top:none;box-sizing:border-box}
#cv-pick{right:8px;bottom:8px;white-space:pre;font:12px/1.4 "DejaVu Sans Mono",Menlo,Consolas,monospace}
#cv-message{position:fixed;left:50%;top:45%;transform:translateX(-50%);background:#fff;border:1px solid #c33;
  padding:8px 12px;border-radius:6px}
[hidden]{display:none!important}
@media (max-width:700px){#cv-tools{max-width:150px}#cv-bottom{max-width:calc(100% - 16px);bottom:auto;top:auto}}
"""

JS = r"""
(function () {
'use strict';
const $ = (id) => document.getElementById(id);
const M = JSON.parse($('cv-meta').textContent);
const canvas = $('cv-canvas');
function message(t) { const m = $('cv-message'); m.textContent = t; m.hidden = !t; }
const gl = canvas.getContext('webgl2', {antialias: true, alpha: false, preserveDrawingBuffer: true});
const api = window.crystalview = {ready: false, error: null};
if (!gl) { message('This browser has no WebGL2, which the 3D view needs (the legend and caption still show).');
  api.error = 'no webgl2'; return; }
const ST = M.style;
const hex = (h) => [1, 3, 5].map((i) => parseInt(h.slice(i, i + 2), 16) / 255);
const BG = hex(ST.background);

// ------------------------------------------------------------ data
let BUF = null;
const TYPES = {f4: Float32Array, u4: Uint32Array, u2: Uint16Array, u1: Uint8Array};
function A(name) { const a = M.arrays[name]; return a ? new TYPES[a[0]](BUF, a[1], a[2]) : null; }
async function unpack() {
  const s = $('cv-data').textContent.trim();
  const bin = atob(s); const n = bin.length; const u = new Uint8Array(n);
  for (let i = 0; i < n; i++) u[i] = bin.charCodeAt(i);
  const ds = new DecompressionStream('deflate');
  return new Response(new Blob([u]).stream().pipeThrough(ds)).arrayBuffer();
}

// ------------------------------------------------------------ shaders
const HEAD = `#version 300 es
precision highp float;
uniform mat3 uRot; uniform vec3 uCentre; uniform float uScale; uniform vec2 uPan; uniform vec2 uVp; uniform float uDepth;
uniform vec4 uLight;
vec3 toView(vec3 p) { return uRot * (p - uCentre); }
vec4 toClip(vec3 q) { return vec4((q.xy * uScale + uPan) / (0.5 * uVp), -q.z / uDepth, 1.0); }
vec3 shade(vec3 n, vec3 c) {
  vec3 L1 = normalize(vec3(-0.45, 0.6, 1.0)), L2 = normalize(vec3(0.6, -0.25, 1.0)), L3 = vec3(0.0, 0.0, 1.0);
  vec3 V = vec3(0.0, 0.0, 1.0);
  float d = 0.75 * max(dot(n, L1), 0.0) + 0.35 * max(dot(n, L2), 0.0) + 0.18 * max(dot(n, L3), 0.0);
  float s = 0.75 * pow(max(dot(n, normalize(L1 + V)), 0.0), uLight.w)
          + 0.35 * pow(max(dot(n, normalize(L2 + V)), 0.0), uLight.w) + 0.18 * pow(max(n.z, 0.0), uLight.w);
  return min(c * (uLight.x + uLight.y * d) + uLight.z * s * mix(c, vec3(1.0), 0.6), vec3(1.0));
}
`;
const SPHERE_V = HEAD + `
in vec2 aCorner; in vec3 aPos; in float aR; in vec3 aCol;
out vec2 vL; out vec3 vQ; out float vR; out vec3 vCol;
uniform float uGrow; uniform float uRingW;
void main() {
  vec3 q = toView(aPos); float r = aR * uGrow;
  float pad = 1.0 + (2.0 + uRingW) / max(r * uScale, 1e-3);
  vL = aCorner * pad; vQ = q; vR = r; vCol = aCol;
  gl_Position = toClip(vec3(q.xy + aCorner * pad * r, q.z + r));
}`;
const SPHERE_F = HEAD + `
in vec2 vL; in vec3 vQ; in float vR; in vec3 vCol; out vec4 o;
uniform float uOpacity; uniform int uMode; uniform float uRingW;
void main() {
  float d2 = dot(vL, vL);
  float rpx = vR * uScale;
  if (uMode == 1) {
    float d = sqrt(d2) * rpx;
    if (d > rpx + 0.5 * uRingW || d < rpx - 0.5 * uRingW) discard;
    o = vec4(vCol, 1.0); gl_FragDepth = gl_FragCoord.z; return;
  }
  if (d2 > 1.0) discard;
  vec3 n = vec3(vL, sqrt(1.0 - d2));
  float z = vQ.z + vR * n.z;
  gl_FragDepth = 0.5 - 0.5 * z / uDepth;
  o = vec4(shade(n, vCol), uOpacity);
}`;
const CYL_V = HEAD + `
in vec3 aCyl; in vec3 aA; in vec3 aB; uniform float uRad; out vec3 vN;
void main() {
  vec3 d = aB - aA; float L = length(d); vec3 u = d / max(L, 1e-9);
  vec3 ref = abs(u.x) < 0.9 ? vec3(1.0, 0.0, 0.0) : vec3(0.0, 1.0, 0.0);
  vec3 e1 = normalize(cross(u, ref)); vec3 e2 = cross(u, e1);
  vec3 rn = e1 * aCyl.x + e2 * aCyl.y;
  vN = uRot * rn;
  gl_Position = toClip(toView(aA + d * aCyl.z + rn * uRad));
}`;
const FLAT_F = HEAD + `
in vec3 vN; out vec4 o; uniform vec3 uCol; uniform float uOpacity;
void main() { vec3 n = normalize(vN); if (n.z < 0.0) n = -n; o = vec4(shade(n, uCol), uOpacity); }`;
const MESH_V = HEAD + `
in vec3 aPos; in vec3 aNrm; out vec3 vN;
void main() { vN = uRot * aNrm; gl_Position = toClip(toView(aPos)); }`;
const LINE_V = HEAD + `
in vec2 aCorner; in vec3 aA; in vec3 aB; uniform float uWidth;
void main() {
  vec3 qa = toView(aA), qb = toView(aB);
  vec2 sa = qa.xy * uScale + uPan, sb = qb.xy * uScale + uPan;
  vec2 d = sb - sa; float L = length(d);
  vec2 t = L > 1e-6 ? d / L : vec2(1.0, 0.0); vec2 nrm = vec2(-t.y, t.x);
  vec2 s = mix(sa, sb, aCorner.x) + nrm * aCorner.y * 0.5 * uWidth + t * (aCorner.x * 2.0 - 1.0) * 0.5 * uWidth;
  float z = mix(qa.z, qb.z, aCorner.x);
  gl_Position = vec4(s / (0.5 * uVp), -z / uDepth, 1.0);
}`;
const LINE_F = `#version 300 es
precision highp float; uniform vec3 uCol; out vec4 o; void main() { o = vec4(uCol, 1.0); }`;

function program(vs, fs) {
  const p = gl.createProgram();
  for (const [type, src] of [[gl.VERTEX_SHADER, vs], [gl.FRAGMENT_SHADER, fs]]) {
    const s = gl.createShader(type); gl.shaderSource(s, src); gl.compileShader(s);
    if (!gl.getShaderParameter(s, gl.COMPILE_STATUS)) throw new Error(gl.getShaderInfoLog(s));
    gl.attachShader(p, s);
  }
  gl.linkProgram(p);
  if (!gl.getProgramParameter(p, gl.LINK_STATUS)) throw new Error(gl.getProgramInfoLog(p));
  const u = {}; const n = gl.getProgramParameter(p, gl.ACTIVE_UNIFORMS);
  for (let i = 0; i < n; i++) { const nm = gl.getActiveUniform(p, i).name; u[nm] = gl.getUniformLocation(p, nm); }
  const a = {}; const m = gl.getProgramParameter(p, gl.ACTIVE_ATTRIBUTES);
  for (let i = 0; i < m; i++) { const nm = gl.getActiveAttrib(p, i).name; a[nm] = gl.getAttribLocation(p, nm); }
  return {p, u, a};
}
function buffer(data) { const b = gl.createBuffer(); gl.bindBuffer(gl.ARRAY_BUFFER, b); gl.bufferData(gl.ARRAY_BUFFER, data, gl.STATIC_DRAW); return b; }
function attrib(loc, buf, size, divisor, type, norm) {
  if (loc === undefined || loc < 0) return;
  gl.bindBuffer(gl.ARRAY_BUFFER, buf); gl.enableVertexAttribArray(loc);
  gl.vertexAttribPointer(loc, size, type || gl.FLOAT, !!norm, 0, 0); gl.vertexAttribDivisor(loc, divisor);
}

// ------------------------------------------------------------ state
const on = {}; for (const g of M.groups) on[g.name] = g.on;
let R = null, scale = 1, pan = [0, 0], C = [0, 0, 0], RAD = 1, DEPTH = 1;
const dpr = () => window.devicePixelRatio || 1;
let picks = [];
let P = {}, draws = [], atomVAO = null, layerVAO = null, pickVAO = null, pickBuf = null;
let atomPos = null, atomR = null, atomSrc = null;

function rowsOf(v) { return [v.right.slice(), v.up.slice(), v.toward.slice()]; }
function view(p) {
  const x = p[0] - C[0], y = p[1] - C[1], z = p[2] - C[2];
  return [R[0][0] * x + R[0][1] * y + R[0][2] * z, R[1][0] * x + R[1][1] * y + R[1][2] * z,
          R[2][0] * x + R[2][1] * y + R[2][2] * z];
}

function setUniforms(pr) {
  const u = pr.u;
  gl.useProgram(pr.p);
  if (u.uRot) gl.uniformMatrix3fv(u.uRot, false, [R[0][0], R[1][0], R[2][0], R[0][1], R[1][1], R[2][1], R[0][2], R[1][2], R[2][2]]);
  if (u.uCentre) gl.uniform3fv(u.uCentre, C);
  if (u.uScale) gl.uniform1f(u.uScale, scale);
  if (u.uPan) gl.uniform2fv(u.uPan, pan);
  if (u.uVp) gl.uniform2f(u.uVp, canvas.width, canvas.height);
  if (u.uDepth) gl.uniform1f(u.uDepth, DEPTH);
  if (u.uLight) gl.uniform4f(u.uLight, ST.ambient, ST.diffuse, ST.specular, ST.shininess);
}

// ------------------------------------------------------------ build
const QUAD = new Float32Array([-1, -1, 1, -1, -1, 1, 1, 1]);
const LQUAD = new Float32Array([0, -1, 1, -1, 0, 1, 1, 1]);
function cylinderGeometry(sides) {
  const v = [];
  for (let k = 0; k <= sides; k++) { const t = 2 * Math.PI * k / sides; v.push(Math.cos(t), Math.sin(t), 0, Math.cos(t), Math.sin(t), 1); }
  return new Float32Array(v);
}
function sphereVAO(pos, r, rgb) {
  const pr = P.sphere, vao = gl.createVertexArray(); gl.bindVertexArray(vao);
  attrib(pr.a.aCorner, P.quad, 2, 0);
  attrib(pr.a.aPos, buffer(pos), 3, 1);
  attrib(pr.a.aR, buffer(r), 1, 1);
  if (rgb) attrib(pr.a.aCol, buffer(rgb), 3, 1, gl.UNSIGNED_BYTE, true);
  gl.bindVertexArray(null); return vao;
}
function colourBytes(idx) {
  const cols = M.colours.map(hex); const out = new Uint8Array(idx.length * 3);
  for (let i = 0; i < idx.length; i++) { const c = cols[idx[i]]; out[3 * i] = c[0] * 255; out[3 * i + 1] = c[1] * 255; out[3 * i + 2] = c[2] * 255; }
  return out;
}
function flatNormals(tri) {
  const n = new Float32Array(tri.length);
  for (let t = 0; t < tri.length; t += 9) {
    const ax = tri[t + 3] - tri[t], ay = tri[t + 4] - tri[t + 1], az = tri[t + 5] - tri[t + 2];
    const bx = tri[t + 6] - tri[t], by = tri[t + 7] - tri[t + 1], bz = tri[t + 8] - tri[t + 2];
    let x = ay * bz - az * by, y = az * bx - ax * bz, z = ax * by - ay * bx; const l = Math.hypot(x, y, z) || 1;
    x /= l; y /= l; z /= l;
    for (let k = 0; k < 3; k++) { n[t + 3 * k] = x; n[t + 3 * k + 1] = y; n[t + 3 * k + 2] = z; }
  }
  return n;
}
function build() {
  P.sphere = program(SPHERE_V, SPHERE_F); P.cyl = program(CYL_V, FLAT_F);
  P.mesh = program(MESH_V, FLAT_F); P.line = program(LINE_V, LINE_F);
  P.quad = buffer(QUAD); P.lquad = buffer(LQUAD);
  const At = M.atoms;
  const lo = [Infinity, Infinity, Infinity], hi = [-Infinity, -Infinity, -Infinity];
  const grow = (arr, pad) => { for (let i = 0; i < arr.length; i += 3) for (let k = 0; k < 3; k++) {
    lo[k] = Math.min(lo[k], arr[i + k] - pad); hi[k] = Math.max(hi[k], arr[i + k] + pad); } };
  let rmax = 0;
  if (At.pos) {
    atomPos = A(At.pos); atomR = A(At.r); atomSrc = A(At.src);
    for (let i = 0; i < atomR.length; i++) rmax = Math.max(rmax, atomR[i]);
    grow(atomPos, rmax);
    if (!At.hidden) {
      atomVAO = sphereVAO(atomPos, atomR, colourBytes(A(At.colour)));
      if (At.layer_colour) layerVAO = sphereVAO(atomPos, atomR, colourBytes(A(At.layer_colour)));
    }
    if (At.bonds) {
      const b = A(At.bonds), seg = new Float32Array(b.length * 3);
      for (let k = 0; k < b.length; k++) for (let j = 0; j < 3; j++) seg[3 * k + j] = atomPos[3 * b[k] + j];
      const ab = new Float32Array(b.length / 2 * 3), bb = new Float32Array(b.length / 2 * 3);
      for (let k = 0; k < b.length / 2; k++) for (let j = 0; j < 3; j++) { ab[3 * k + j] = seg[6 * k + j]; bb[3 * k + j] = seg[6 * k + 3 + j]; }
      const pr = P.cyl, vao = gl.createVertexArray(); gl.bindVertexArray(vao);
      const geo = cylinderGeometry(b.length / 2 > 100000 ? 8 : (b.length / 2 > 20000 ? 12 : 16));
      attrib(pr.a.aCyl, buffer(geo), 3, 0); attrib(pr.a.aA, buffer(ab), 3, 1); attrib(pr.a.aB, buffer(bb), 3, 1);
      gl.bindVertexArray(null);
      draws.push({kind: 'cyl', group: 'bonds', vao, count: geo.length / 3, n: b.length / 2, colour: hex(ST.bond), radius: At.bond_radius});
    }
  }
  for (const s of M.spheres) {
    const pos = A(s.pos), r = A(s.r); let m = 0; for (let i = 0; i < r.length; i++) m = Math.max(m, r[i]);
    grow(pos, m);
    draws.push({kind: 'sphere', group: s.group, vao: sphereVAO(pos, r, null), n: s.n, colour: hex(s.colour), opacity: s.opacity});
  }
  for (const s of M.rings) {
    draws.push({kind: 'ring', group: s.group, vao: sphereVAO(A(s.pos), A(s.r), null), n: s.n, colour: hex(s.colour), front: s.front});
  }
  for (const l of M.lines) {
    const seg = A(l.seg); grow(seg, 0);
    const a = new Float32Array(seg.length / 2), b = new Float32Array(seg.length / 2);
    for (let k = 0; k < seg.length / 6; k++) for (let j = 0; j < 3; j++) { a[3 * k + j] = seg[6 * k + j]; b[3 * k + j] = seg[6 * k + 3 + j]; }
    const pr = P.line, vao = gl.createVertexArray(); gl.bindVertexArray(vao);
    attrib(pr.a.aCorner, P.lquad, 2, 0); attrib(pr.a.aA, buffer(a), 3, 1); attrib(pr.a.aB, buffer(b), 3, 1);
    gl.bindVertexArray(null);
    draws.push({kind: 'line', group: l.group, vao, n: l.n, colour: hex(l.colour), width: l.width, front: l.front});
  }
  for (const m of M.meshes) {
    const tri = A(m.tri); grow(tri, 0);
    const pr = P.mesh, vao = gl.createVertexArray(); gl.bindVertexArray(vao);
    attrib(pr.a.aPos, buffer(tri), 3, 0); attrib(pr.a.aNrm, buffer(flatNormals(tri)), 3, 0);
    gl.bindVertexArray(null);
    draws.push({kind: 'mesh', group: m.group, vao, count: tri.length / 3, colour: hex(m.colour), opacity: m.opacity});
  }
  if (!isFinite(lo[0])) { lo[0] = lo[1] = lo[2] = -1; hi[0] = hi[1] = hi[2] = 1; }
  C = [0, 1, 2].map((k) => (lo[k] + hi[k]) / 2);
  RAD = 0.5 * Math.hypot(hi[0] - lo[0], hi[1] - lo[1], hi[2] - lo[2]) + 1e-3;
  DEPTH = RAD * 1.05 + 1;
  pickBuf = [gl.createBuffer(), gl.createBuffer()];
  pickVAO = gl.createVertexArray(); gl.bindVertexArray(pickVAO);
  attrib(P.sphere.a.aCorner, P.quad, 2, 0);
  attrib(P.sphere.a.aPos, pickBuf[0], 3, 1); attrib(P.sphere.a.aR, pickBuf[1], 1, 1);
  gl.bindVertexArray(null);
}

// ------------------------------------------------------------ drawing
let pending = false;
function redraw() { if (!pending) { pending = true; requestAnimationFrame(frame); } }
function visible(g) { return on[g] !== false && (g !== 'atoms' || on.atoms); }
function drawOne(d) {
  if (d.kind === 'sphere' || d.kind === 'ring') {
    const pr = P.sphere; setUniforms(pr);
    gl.uniform1f(pr.u.uGrow, d.grow || 1.0);
    gl.uniform1i(pr.u.uMode, d.kind === 'ring' ? 1 : 0);
    gl.uniform1f(pr.u.uRingW, (d.ringw || 2.5) * dpr());
    gl.uniform1f(pr.u.uOpacity, d.opacity === undefined ? 1.0 : d.opacity);
    gl.bindVertexArray(d.vao);
    if (d.colour) gl.vertexAttrib3fv(pr.a.aCol, d.colour);
    gl.drawArraysInstanced(gl.TRIANGLE_STRIP, 0, 4, d.n);
  } else if (d.kind === 'cyl') {
    const pr = P.cyl; setUniforms(pr);
    gl.uniform1f(pr.u.uRad, d.radius); gl.uniform3fv(pr.u.uCol, d.colour); gl.uniform1f(pr.u.uOpacity, 1.0);
    gl.bindVertexArray(d.vao); gl.drawArraysInstanced(gl.TRIANGLE_STRIP, 0, d.count, d.n);
  } else if (d.kind === 'mesh') {
    const pr = P.mesh; setUniforms(pr);
    gl.uniform3fv(pr.u.uCol, d.colour); gl.uniform1f(pr.u.uOpacity, d.opacity);
    gl.bindVertexArray(d.vao); gl.drawArrays(gl.TRIANGLES, 0, d.count);
  } else if (d.kind === 'line') {
    const pr = P.line; setUniforms(pr);
    gl.uniform3fv(pr.u.uCol, d.colour); gl.uniform1f(pr.u.uWidth, Math.max(1, d.width * dpr()));
    gl.bindVertexArray(d.vao); gl.drawArraysInstanced(gl.TRIANGLE_STRIP, 0, 4, d.n);
  }
}
function frame() {
  pending = false;
  resize();
  gl.viewport(0, 0, canvas.width, canvas.height);
  gl.clearColor(BG[0], BG[1], BG[2], 1); gl.clearDepth(1);
  gl.clear(gl.COLOR_BUFFER_BIT | gl.DEPTH_BUFFER_BIT);
  gl.enable(gl.DEPTH_TEST); gl.depthFunc(gl.LEQUAL); gl.depthMask(true); gl.disable(gl.BLEND);
  // opaque
  if (on.atoms && atomVAO) {
    const vao = (on.layers && layerVAO) ? layerVAO : atomVAO;
    drawOne({kind: 'sphere', vao, n: atomR.length, opacity: 1.0});
  }
  for (const d of draws) if (d.kind === 'sphere' && d.opacity >= 1 && visible(d.group)) drawOne(d);
  for (const d of draws) if ((d.kind === 'cyl' || (d.kind === 'mesh' && d.opacity >= 1)) && visible(d.group)) drawOne(d);
  for (const d of draws) if (d.kind === 'line' && !d.front && visible(d.group)) drawOne(d);
  for (const d of draws) if (d.kind === 'ring' && !d.front && visible(d.group)) drawOne(d);
  // translucent
  gl.enable(gl.BLEND); gl.blendFunc(gl.SRC_ALPHA, gl.ONE_MINUS_SRC_ALPHA); gl.depthMask(false);
  for (const d of draws) if (((d.kind === 'mesh') || d.kind === 'sphere') && d.opacity < 1 && visible(d.group)) drawOne(d);
  gl.depthMask(true); gl.disable(gl.BLEND);
  // over everything: marks that must show (faults, vacancies, picks)
  gl.disable(gl.DEPTH_TEST);
  for (const d of draws) if ((d.kind === 'line' || d.kind === 'ring') && d.front && visible(d.group)) drawOne(d);
  if (picks.length) {
    const pos = new Float32Array(picks.length * 3), r = new Float32Array(picks.length);
    picks.forEach((k, i) => { for (let j = 0; j < 3; j++) pos[3 * i + j] = atomPos[3 * k + j]; r[i] = atomR[k] * 1.18; });
    gl.bindBuffer(gl.ARRAY_BUFFER, pickBuf[0]); gl.bufferData(gl.ARRAY_BUFFER, pos, gl.DYNAMIC_DRAW);
    gl.bindBuffer(gl.ARRAY_BUFFER, pickBuf[1]); gl.bufferData(gl.ARRAY_BUFFER, r, gl.DYNAMIC_DRAW);
    drawOne({kind: 'ring', vao: pickVAO, n: picks.length, colour: hex(ST.highlight), ringw: 3.5});
  }
  gl.bindVertexArray(null);
  updateScaleBar();
  if (!api.ready) { api.ready = true; document.body.setAttribute('data-ready', '1'); }
}
function resize() {
  const w = Math.max(1, Math.round(canvas.clientWidth * dpr())), h = Math.max(1, Math.round(canvas.clientHeight * dpr()));
  if (canvas.width !== w || canvas.height !== h) { canvas.width = w; canvas.height = h; }
}

// ------------------------------------------------------------ camera
function region() {
  // the part of the window the panels leave free (device pixels, relative to the canvas centre, y up)
  const W = canvas.clientWidth, H = canvas.clientHeight;
  let x0 = 12, x1 = W - 12, y0 = 12, y1 = H - 12;
  const t = $('cv-tools').getBoundingClientRect(), l = $('cv-legend').getBoundingClientRect();
  const b = $('cv-bottom').getBoundingClientRect();
  if (W > 700) {
    if (!$('cv-tools').hidden) x0 = Math.max(x0, t.right + 12);
    if (!$('cv-legend').hidden && l.width) x1 = Math.min(x1, l.left - 12);
  }
  if (b.height) y1 = Math.min(y1, b.top - 8);
  if (x1 - x0 < W * 0.4) { x0 = 12; x1 = W - 12; }
  if (y1 - y0 < H * 0.4) { y0 = 12; y1 = H - 12; }
  const k = dpr();
  return {w: (x1 - x0) * k, h: (y1 - y0) * k, cx: ((x0 + x1) / 2 - W / 2) * k, cy: (H / 2 - (y0 + y1) / 2) * k, cssw: x1 - x0};
}
function fit() {
  resize();
  const lo = [Infinity, Infinity], hi = [-Infinity, -Infinity];
  const take = (arr, rad) => { for (let i = 0; i < arr.length; i += 3) { const q = view([arr[i], arr[i + 1], arr[i + 2]]);
    const r = rad ? rad[i / 3] : 0; lo[0] = Math.min(lo[0], q[0] - r); lo[1] = Math.min(lo[1], q[1] - r);
    hi[0] = Math.max(hi[0], q[0] + r); hi[1] = Math.max(hi[1], q[1] + r); } };
  if (atomPos && on.atoms) take(atomPos, atomR);
  for (const s of M.spheres) if (visible(s.group)) take(A(s.pos), A(s.r));
  for (const l of M.lines) if (visible(l.group)) take(A(l.seg), null);
  for (const m of M.meshes) if (visible(m.group)) take(A(m.tri), null);
  if (!isFinite(lo[0])) { lo[0] = lo[1] = -RAD; hi[0] = hi[1] = RAD; }
  const g = region();
  scale = Math.min(g.w / Math.max(hi[0] - lo[0], 1e-3), g.h / Math.max(hi[1] - lo[1], 1e-3)) * 0.96;
  pan = [g.cx - scale * (lo[0] + hi[0]) / 2, g.cy - scale * (lo[1] + hi[1]) / 2];
  redraw();
}
function ortho(R) {
  const n = (v) => { const l = Math.hypot(v[0], v[1], v[2]); return v.map((x) => x / l); };
  const cross = (a, b) => [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]];
  const z = n(R[2]); const x = n(cross(R[1], z)); const y = cross(z, x);
  return [x, y, z];
}
function turn(ax, ay) {
  // rotate the crystal about the screen's vertical (ax) and horizontal (ay) axes
  const rot = (M3, a, i, j) => { const c = Math.cos(a), s = Math.sin(a), out = M3.map((r) => r.slice());
    for (let k = 0; k < 3; k++) { out[i][k] = c * M3[i][k] + s * M3[j][k]; out[j][k] = -s * M3[i][k] + c * M3[j][k]; } return out; };
  R = rot(R, ax, 0, 2); R = rot(R, -ay, 1, 2); R = ortho(R);
  redraw();
}
function zoomAt(f, sx, sy) {
  const ns = Math.min(Math.max(scale * f, 1e-3), 1e6); const k = ns / scale;
  pan = [sx - (sx - pan[0]) * k, sy - (sy - pan[1]) * k]; scale = ns; redraw();
}
function setView(v, label) { R = rowsOf(v); fit(); status(`view along ${label || v.label}, ${v.up_label} up`); }

// ------------------------------------------------------------ picking
function toScreen(k) { // drawn atom k -> device pixels relative to the canvas centre (y up), and depth
  const q = view([atomPos[3 * k], atomPos[3 * k + 1], atomPos[3 * k + 2]]);
  return [q[0] * scale + pan[0], q[1] * scale + pan[1], q[2]];
}
function pickAt(cssX, cssY) {
  if (!atomPos || !on.atoms) return -1;
  const rect = canvas.getBoundingClientRect(), k = dpr();
  const mx = (cssX - rect.left - rect.width / 2) * k, my = (rect.height / 2 - (cssY - rect.top)) * k;
  let best = -1, bestZ = -Infinity;
  const inv = 1 / scale;
  for (let i = 0; i < atomR.length; i++) {
    const s = toScreen(i); const dx = (s[0] - mx) * inv, dy = (s[1] - my) * inv, r = atomR[i];
    const d2 = dx * dx + dy * dy;
    if (d2 <= r * r) { const z = s[2] + Math.sqrt(r * r - d2); if (z > bestZ) { bestZ = z; best = i; } }
  }
  return best;
}
const f3 = (v, d) => v.map((x) => x.toFixed(d)).join(', ');
function facts(k) {
  const F = M.facts, i = atomSrc[k], el = F.elements[A('element')[i]], role = F.roles[A('role')[i]];
  const p = [atomPos[3 * k], atomPos[3 * k + 1], atomPos[3 * k + 2]];
  const inv = F.cell_inv, fr = [0, 1, 2].map((c) => p[0] * inv[0][c] + p[1] * inv[1][c] + p[2] * inv[2][c]);
  let mix = '';
  if (F.mix) { const m = A('mix'), E = F.elements.length, parts = [];
    for (let e = 0; e < E; e++) if (m[i * E + e]) parts.push(`${F.elements[e]} ${m[i * E + e]}`);
    if (parts.length > 1) mix = ` (${parts.join(', ')})`; }
  return {index: i, element: el, role, p, fr, cn: A('cn')[i], mix};
}
function describe() {
  const box = $('cv-pick');
  if (!picks.length) { box.hidden = true; box.textContent = ''; return; }
  const fs = picks.map(facts); let t;
  if (fs.length === 1) {
    const f = fs[0];
    t = `${f.element} atom ${f.index}, ${f.role}\nat ${f3(f.p, 3)} \u00c5\nfractional ${f3(f.fr, 4)}\ncoordination ${f.cn}${f.mix}`;
  } else {
    const [a, b] = fs; const d = Math.hypot(a.p[0] - b.p[0], a.p[1] - b.p[1], a.p[2] - b.p[2]);
    t = fs.map((f, n) => `${n + 1}: ${f.element} atom ${f.index}, ${f.role}, coordination ${f.cn}\n   at ${f3(f.p, 3)} \u00c5`).join('\n')
      + `\ndistance ${a.element} ${a.index} to ${b.element} ${b.index}: ${d.toFixed(4)} \u00c5`;
  }
  box.textContent = t; box.hidden = false;
}
function clickAt(x, y) {
  const k = pickAt(x, y);
  if (k < 0) { status('no atom there'); return -1; }
  picks.push(k); if (picks.length > 2) picks = picks.slice(-2);
  describe(); redraw(); return k;
}

// ------------------------------------------------------------ panels
function status(t) { $('cv-status').textContent = t || ''; }
function legendUpdate() {
  $('cv-legend').hidden = !on.legend;
  for (const li of document.querySelectorAll('#cv-legend li')) {
    const g = li.dataset.group, w = li.dataset.when;
    let show = on[g] !== false;
    if (g === 'atoms') show = on.atoms && (w === 'any' || (w === 'layers') === !!on.layers);
    li.hidden = !show;
  }
}
function setGroup(g, v) {
  if (!(g in on)) return;
  on[g] = v;
  const b = document.querySelector(`#cv-toggles button[data-group="${g}"]`);
  if (b) b.setAttribute('aria-pressed', String(!!v));
  legendUpdate(); redraw();
}
function roundLength(t) {
  if (!(t > 0) || !isFinite(t)) return 1;
  const e = Math.floor(Math.log10(t)); let best = Math.pow(10, e);
  for (const m of [1, 2, 5, 10]) { const v = m * Math.pow(10, e); if (v <= t * 1.0000001) best = v; }
  return best;
}
function updateScaleBar() {
  const pxPerA = scale / dpr(); const g = region();
  const L = roundLength(0.22 * g.cssw / pxPerA);
  $('cv-scale-bar').style.width = (L * pxPerA).toFixed(1) + 'px';
  $('cv-scale-text').textContent = `${+L.toPrecision(6)} \u00c5`;
}
function panels() {
  const tg = $('cv-toggles');
  for (const g of M.groups) {
    const b = document.createElement('button');
    b.dataset.group = g.name; b.setAttribute('aria-pressed', String(!!on[g.name]));
    b.title = `show or hide: ${g.label} (key ${g.key})`;
    b.innerHTML = `${g.label}<kbd>${g.key}</kbd>`;
    b.addEventListener('click', () => setGroup(g.name, !on[g.name]));
    tg.appendChild(b);
  }
  const vw = $('cv-views');
  const start = {label: M.view.label, up_label: M.view.up_label, toward: M.view.toward, up: M.view.up, right: M.view.right};
  const all = [start].concat(M.views);
  all.forEach((v, n) => {
    const b = document.createElement('button');
    b.textContent = n === 0 ? `start ${v.label}` : v.label; b.dataset.view = String(n);
    b.title = `look along ${v.label} (key ${n === 0 ? 'r' : n})`;
    b.addEventListener('click', () => setView(v));
    vw.appendChild(b);
  });
  api.views = all.map((v) => v.label);
  const act = [['clear picks', 'u', () => { picks = []; describe(); redraw(); }],
               ['fit', 'z', () => fit()], ['hide panel', 'k', () => { $('cv-tools').hidden = true; fit(); }]];
  for (const [label, key, fn] of act) {
    const b = document.createElement('button'); b.innerHTML = `${label}<kbd>${key}</kbd>`; b.addEventListener('click', fn);
    $('cv-actions').appendChild(b);
  }
  window.addEventListener('keydown', (e) => {
    if (e.ctrlKey || e.metaKey || e.altKey) return;
    const k = e.key.toLowerCase();
    const g = M.groups.find((x) => x.key === k);
    if (g) { setGroup(g.name, !on[g.name]); return; }
    if (k === 'r') setView(start);
    else if (k === 'u') { picks = []; describe(); redraw(); }
    else if (k === 'z') fit();
    else if (k === 'k') { $('cv-tools').hidden = !$('cv-tools').hidden; }
    else if (/^[1-9]$/.test(k) && all[+k]) setView(all[+k]);
  });
  return start;
}

// ------------------------------------------------------------ mouse, touch
function pointerControls() {
  const pts = new Map(); let down = null, moved = false, pinch = null;
  canvas.addEventListener('contextmenu', (e) => e.preventDefault());
  canvas.addEventListener('pointerdown', (e) => {
    canvas.setPointerCapture(e.pointerId); pts.set(e.pointerId, [e.clientX, e.clientY]);
    if (pts.size === 1) { down = {x: e.clientX, y: e.clientY, lx: e.clientX, ly: e.clientY, button: e.button, shift: e.shiftKey}; moved = false; }
    if (pts.size === 2) { const [a, b] = [...pts.values()]; pinch = {d: Math.hypot(a[0] - b[0], a[1] - b[1]), m: [(a[0] + b[0]) / 2, (a[1] + b[1]) / 2]}; moved = true; }
  });
  canvas.addEventListener('pointermove', (e) => {
    if (!pts.has(e.pointerId)) return;
    pts.set(e.pointerId, [e.clientX, e.clientY]);
    const k = dpr();
    if (pts.size === 2 && pinch) {
      const [a, b] = [...pts.values()]; const d = Math.hypot(a[0] - b[0], a[1] - b[1]), m = [(a[0] + b[0]) / 2, (a[1] + b[1]) / 2];
      pan = [pan[0] + (m[0] - pinch.m[0]) * k, pan[1] - (m[1] - pinch.m[1]) * k];
      const rect = canvas.getBoundingClientRect();
      zoomAt(d / Math.max(pinch.d, 1), (m[0] - rect.left - rect.width / 2) * k, (rect.height / 2 - (m[1] - rect.top)) * k);
      pinch = {d, m}; return;
    }
    if (!down) return;
    const dx = e.clientX - down.lx, dy = e.clientY - down.ly; down.lx = e.clientX; down.ly = e.clientY;
    if (Math.hypot(e.clientX - down.x, e.clientY - down.y) > 4) moved = true;
    if (!moved) return;
    if (down.button === 0 && !down.shift && !e.shiftKey) turn(dx * 0.01, dy * 0.01);
    else { pan = [pan[0] + dx * k, pan[1] - dy * k]; redraw(); }
  });
  const up = (e) => {
    if (!pts.has(e.pointerId)) return;
    pts.delete(e.pointerId);
    if (pts.size === 0) { if (down && !moved && down.button === 0 && e.type === 'pointerup') clickAt(e.clientX, e.clientY); down = null; pinch = null; }
  };
  canvas.addEventListener('pointerup', up); canvas.addEventListener('pointercancel', up);
  canvas.addEventListener('wheel', (e) => {
    e.preventDefault(); const rect = canvas.getBoundingClientRect(), k = dpr();
    const unit = e.deltaMode === 1 ? 16 : (e.deltaMode === 2 ? 400 : 1);
    zoomAt(Math.exp(-e.deltaY * unit * 0.0015), (e.clientX - rect.left - rect.width / 2) * k, (rect.height / 2 - (e.clientY - rect.top)) * k);
  }, {passive: false});
  window.addEventListener('resize', () => redraw());
}

// ------------------------------------------------------------ start
unpack().then((buf) => {
  BUF = buf;
  build();
  R = rowsOf(M.view);
  panels(); pointerControls(); legendUpdate();
  fit();
  Object.assign(api, {
    atoms: atomR ? atomR.length : 0,
    groups: () => Object.assign({}, on),
    toggle: (g) => setGroup(g, !on[g]),
    setView: (i) => { const v = i === 0 ? M.view : M.views[i - 1]; setView(v); },
    // css pixel position (page coordinates) of drawn atom k
    atomAt: (k) => { const s = toScreen(k), rect = canvas.getBoundingClientRect(), d = dpr();
      return [rect.left + rect.width / 2 + s[0] / d, rect.top + rect.height / 2 - s[1] / d]; },
    frontAtom: () => { let best = -1, z = -Infinity; for (let i = 0; i < atomR.length; i++) { const s = toScreen(i);
      if (s[2] + atomR[i] > z) { z = s[2] + atomR[i]; best = i; } } return best; },
    click: (x, y) => clickAt(x, y), pickText: () => $('cv-pick').textContent,
    colours: () => M.colours.slice(),
  });
}).catch((err) => { api.error = String(err); message('Could not draw the crystal: ' + err); });
})();
"""


def _legend_html(meta):
    rows = []
    for e in meta["legend"]:
        shape = e["shape"] if e["shape"] in ("ball", "ring", "line", "arrow", "patch", "none") else "patch"
        colour = html.escape(e["colour"])
        style = f"color:{colour};background:{colour};border-left-color:{colour}"
        rows.append(f'<li data-group="{html.escape(e["group"])}" data-when="{e["when"]}">'
                    f'<span class="cv-sw {shape}" style="{style}"></span>'
                    f'<span class="cv-label">{html.escape(e["label"])}</span></li>')
    return "<ul>" + "".join(rows) + "</ul>"


def _script_json(obj):
    """JSON safe inside a <script> element."""
    s = json.dumps(obj, ensure_ascii=True, separators=(",", ":"))
    return s.replace("</", "<\\/").replace("<!--", "<\\!--")


def page(meta, packed):
    """The whole page as text.

    >>> cell = [[3.6149, 0, 0], [0, 3.6149, 0], [0, 0, 3.6149]]
    >>> meta = dict(title="Cu fcc", caption=["a = 3.6149 A"], legend=[], facts={"cell": cell},
    ...             style={"background": "#ffffff", "text": "#222222"})
    >>> text = page(meta, "")
    >>> text.startswith("<!DOCTYPE html>"), "<title>Cu fcc</title>" in text
    (True, True)
    """
    import numpy as np

    meta = dict(meta)
    facts = dict(meta["facts"])
    facts["cell_inv"] = np.linalg.inv(np.asarray(facts["cell"], float)).round(12).tolist()
    meta["facts"] = facts
    st = meta["style"]
    css = CSS.replace("BG", st["background"]).replace("FG", st["text"])
    title = html.escape(meta["title"])
    caption = "".join(f"<div>{html.escape(t)}</div>" for t in meta["caption"])
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n"
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; script-src 'unsafe-inline'; "
        "style-src 'unsafe-inline'\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        "<meta name=\"generator\" content=\"crystalview\">\n"
        f"<title>{title}</title>\n<style>{css}</style></head>\n<body>\n"
        "<canvas id=\"cv-canvas\" aria-label=\"the crystal in 3D: drag to turn, wheel to zoom\"></canvas>\n"
        f"<div id=\"cv-tools\" class=\"cv-panel\"><h1>{title}</h1>"
        "<div class=\"cv-row\" id=\"cv-toggles\"></div><div class=\"cv-row\" id=\"cv-views\"></div>"
        "<div class=\"cv-row\" id=\"cv-actions\"></div>"
        "<div class=\"cv-help\">drag: turn &middot; wheel or pinch: zoom &middot; shift+drag or right drag: move "
        "&middot; click an atom: what it is &middot; click a second: the distance</div>"
        "<div class=\"cv-help\" id=\"cv-status\"></div></div>\n"
        f"<div id=\"cv-legend\" class=\"cv-panel\">{_legend_html(meta)}</div>\n"
        "<div id=\"cv-bottom\" class=\"cv-panel\"><div id=\"cv-scale\"><div id=\"cv-scale-bar\"></div>"
        f"<span id=\"cv-scale-text\"></span></div><div id=\"cv-caption\">{caption}</div></div>\n"
        "<div id=\"cv-pick\" class=\"cv-panel\" hidden></div>\n<div id=\"cv-message\" hidden></div>\n"
        "<noscript><p style=\"position:fixed;top:45%;width:100%;text-align:center\">This page needs JavaScript "
        "and WebGL2 to draw the crystal.</p></noscript>\n"
        f"<script type=\"application/json\" id=\"cv-meta\">{_script_json(meta)}</script>\n"
        f"<script type=\"application/octet-stream\" id=\"cv-data\">{packed}</script>\n"
        f"<script>{JS}</script>\n</body></html>\n"
    )
