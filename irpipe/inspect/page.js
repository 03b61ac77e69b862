/* irpipe inspect: read temperatures, draw regions, assign emissivity by region.
 * Self-contained: the data is the JSON element #irpipe-data written by irpipe.inspect.
 * Every text from the config is shown with textContent (never parsed as HTML).
 *
 * Geometry is (row, col). How a drag becomes a region spec:
 *  - rectangle: the two ends of the drag snap to the nearest pixel edges; rect
 *    [row0, col0, row1, col1] is half-open (rows row0 .. row1-1), as in the config;
 *  - ellipse: fills the dragged box (edges snapped as for a rectangle); centre and radii
 *    are in pixel-centre coordinates (pixel (r, c) has its centre at (r, c));
 *  - polygon: each click adds the centre of the clicked pixel as a vertex.
 * Masks follow irpipe.regions.region_mask: polygon = pixel centres inside or on the
 * outline; ellipse = centres strictly inside.
 */
(function () {
  "use strict";
  var resolveReady, rejectReady;
  var api = { ready: new Promise(function (res, rej) { resolveReady = res; rejectReady = rej; }) };
  window.irpipe = api;

  var K0 = 273.15;
  var D = JSON.parse(document.getElementById("irpipe-data").textContent);
  var STACKS = [], BY_NAME = {};
  var LUT = new Uint8Array(768);
  (function () { for (var i = 0; i < 768; i++) LUT[i] = parseInt(D.colour_table.substr(2 * i, 2), 16); })();

  // ---------------------------------------------------------------- decoding
  function bytes(s) {
    var bin = atob(s), n = bin.length, u = new Uint8Array(n);
    for (var i = 0; i < n; i++) u[i] = bin.charCodeAt(i);
    return u;
  }
  function f32(s) { var b = bytes(s); return new Float32Array(b.buffer, 0, b.length >> 2); }
  function f64(s) { var b = bytes(s); return new Float64Array(b.buffer, 0, b.length >> 3); }
  function u16(s) { var b = bytes(s); return new Uint16Array(b.buffer, 0, b.length >> 1); }
  function field(f, n) {
    var out = new Float64Array(n), i;
    if (f.map) { var m = f32(f.map); for (i = 0; i < n; i++) out[i] = m[i]; return out; }
    var idx = f.bits === 16 ? u16(f.index) : bytes(f.index);
    for (i = 0; i < n; i++) out[i] = f.values[idx[i]];
    return out;
  }
  function el(tag, props) {
    var e = document.createElement(tag);
    if (props) for (var k in props) {
      if (k === "text") e.textContent = props[k]; else if (k === "cls") e.className = props[k];
      else e.setAttribute(k, props[k]);
    }
    for (var i = 2; i < arguments.length; i++) { var c = arguments[i]; if (c != null) e.appendChild(typeof c === "string" ? document.createTextNode(c) : c); }
    return e;
  }
  function copy(x) { return JSON.parse(JSON.stringify(x)); }
  function fmt(x, d) { return (x === null || x === undefined || !isFinite(x)) ? "-" : x.toFixed(d); }

  // ---------------------------------------------------------------- masks (as irpipe.regions.region_mask)
  function ellipseOf(r) {
    var e = r.ellipse;
    if (Array.isArray(e)) return { center: [e[0], e[1]], radii: [e[2], e[3]] };
    return { center: e.center || e.centre, radii: e.radii };
  }
  function kind(r) { return r.rect ? "rect" : r.polygon ? "polygon" : r.ellipse ? "ellipse" : r.mask ? "mask" : null; }
  function maskOf(S, r) {
    var R = S.rows, C = S.cols, m = new Uint8Array(R * C), i, j;
    if (r.rect) {
      var r0 = Math.max(r.rect[0], 0), c0 = Math.max(r.rect[1], 0), r1 = Math.min(Math.max(r.rect[2], 0), R), c1 = Math.min(Math.max(r.rect[3], 0), C);
      for (i = r0; i < r1; i++) for (j = c0; j < c1; j++) m[i * C + j] = 1;
    } else if (r.polygon) {
      var vr = r.polygon.map(function (v) { return +v[0]; }), vc = r.polygon.map(function (v) { return +v[1]; });
      var minr = Math.floor(Math.max(0, Math.min.apply(null, vr))), maxr = Math.min(R - 1, Math.ceil(Math.max.apply(null, vr)));
      var minc = Math.floor(Math.max(0, Math.min.apply(null, vc))), maxc = Math.min(C - 1, Math.ceil(Math.max.apply(null, vc)));
      for (i = minr; i <= maxr; i++) for (j = minc; j <= maxc; j++) if (inPolygon(vc, vr, j, i)) m[i * C + j] = 1;
    } else if (r.ellipse) {
      var e = ellipseOf(r), cr = +e.center[0], cc = +e.center[1], ar = +e.radii[0], ac = +e.radii[1];
      var ul0 = Math.max(Math.ceil(cr - ar), 0), ul1 = Math.max(Math.ceil(cc - ac), 0);
      var lr0 = Math.min(Math.floor(cr + ar), R - 1), lr1 = Math.min(Math.floor(cc + ac), C - 1);
      var sr = cr - ul0, sc = cc - ul1;
      for (i = 0; i <= lr0 - ul0; i++) for (j = 0; j <= lr1 - ul1; j++) {
        var a = (i - sr) / ar, b = -(j - sc) / ac;
        if (a * a + b * b < 1) m[(i + ul0) * C + j + ul1] = 1;
      }
    } else if (r.mask && S.fileMasks.has(r)) {
      return S.fileMasks.get(r);
    }
    return m;
  }
  // point (x = col, y = row) against a polygon by crossing counts in both directions:
  // inside, on a vertex (within 1e-12) or on the outline count as inside
  // (J. O'Rourke, "Computational Geometry in C", 2nd ed., Cambridge University Press 1998, ch. 7)
  function inPolygon(xp, yp, x, y) {
    var n = xp.length, rc = 0, lc = 0, x1 = xp[n - 1] - x, y1 = yp[n - 1] - y, eps = 1e-12;
    for (var i = 0; i < n; i++) {
      var x0 = xp[i] - x, y0 = yp[i] - y;
      if (-eps < x0 && x0 < eps && -eps < y0 && y0 < eps) return true;
      if ((y0 > 0) !== (y1 > 0) && (x0 * y1 - x1 * y0) / (y1 - y0) > 0) rc++;
      if ((y0 < 0) !== (y1 < 0) && (x0 * y1 - x1 * y0) / (y1 - y0) < 0) lc++;
      x1 = x0; y1 = y0;
    }
    return (rc & 1) !== (lc & 1) || (rc & 1) === 1;
  }
  function geometryProblem(S, r) {
    var R = S.rows, C = S.cols;
    if (r.rect) {
      var q = r.rect;
      if (q.length !== 4 || !q.every(function (v) { return Number.isInteger(v); })) return "rect must be 4 whole numbers [row0, col0, row1, col1]";
      if (!(0 <= q[0] && q[0] < q[2] && q[2] <= R && 0 <= q[1] && q[1] < q[3] && q[3] <= C))
        return "rect must satisfy 0 <= row0 < row1 <= " + R + " and 0 <= col0 < col1 <= " + C;
    } else if (r.polygon) {
      if (!Array.isArray(r.polygon) || r.polygon.length < 3) return "a polygon needs at least 3 vertices [[row, col], ...]";
      for (var k = 0; k < r.polygon.length; k++) {
        var v = r.polygon[k];
        if (!Array.isArray(v) || v.length !== 2 || !isFinite(v[0]) || !isFinite(v[1])) return "polygon vertices are [row, col] pairs";
        if (v[0] < 0 || v[0] > R - 1 || v[1] < 0 || v[1] > C - 1) return "polygon vertices must lie within rows 0.." + (R - 1) + " and cols 0.." + (C - 1);
      }
    } else if (r.ellipse) {
      var e = ellipseOf(r);
      if (!e.center || !e.radii || !(e.radii[0] > 0 && e.radii[1] > 0)) return "ellipse needs center: [row, col] and radii: [rows, cols] > 0";
      if (e.center[0] - e.radii[0] < -0.5 || e.center[0] + e.radii[0] > R - 0.5 || e.center[1] - e.radii[1] < -0.5 || e.center[1] + e.radii[1] > C - 0.5)
        return "ellipse reaches outside the " + R + "x" + C + " image";
    } else if (!r.mask) return "give one of rect, polygon, ellipse";
    return null;
  }

  // ---------------------------------------------------------------- measurement equation
  // G(T') = [eps G(T) + (eps' - eps) G(T_refl)] / eps'  (irpipe.correction; path emission cancels)
  function gOf(S, tk) {
    var x = (tk - S.t0) / S.tstep, n = S.G.length, i = Math.floor(x);
    if (i < 0) i = 0; if (i > n - 2) i = n - 2;
    return S.G[i] + (S.G[i + 1] - S.G[i]) * (x - i);
  }
  function slope(S, tk) {
    var i = Math.floor((tk - S.t0) / S.tstep), n = S.G.length;
    if (i < 0) i = 0; if (i > n - 2) i = n - 2;
    return (S.G[i + 1] - S.G[i]) / S.tstep;
  }
  function gInv(S, g) {
    var G = S.G, n = G.length;
    if (!(g >= G[0] && g <= G[n - 1])) return NaN;
    var lo = 0, hi = n - 1;
    while (hi - lo > 1) { var mid = (lo + hi) >> 1; if (G[mid] <= g) lo = mid; else hi = mid; }
    return S.t0 + S.tstep * (lo + (g - G[lo]) / (G[hi] - G[lo]));
  }
  function recomputed(S, p, e0, e1) {
    var tm = S.T0[p];
    if (!isFinite(tm)) return NaN;
    function one(tc, gr) { return gInv(S, (e0 * gOf(S, tc + K0) + (e1 - e0) * gr) / e1) - K0; }
    if (!S.fq) return one(tm, S.grefl);
    var N = S.rows * S.cols, sum = 0, sumT = 0, n = 0;
    for (var f = 0; f < S.nq; f++) {
      var q = S.fq[f * N + p];
      if (q === 65535) continue;
      var tc = S.qlo + q * S.qstep, t = one(tc, S.greflFrames ? S.greflFrames[f] : S.grefl);
      if (!isFinite(t)) continue;
      sum += t; sumT += tc; n++;
    }
    if (!n) return one(tm, S.grefl);
    var aq = sum / n, c = tm - sumT / n;
    return aq + c * e0 * slope(S, tm + K0) / (e1 * slope(S, aq + K0));
  }

  // ---------------------------------------------------------------- emissivity by region
  function surfaceValue(v) { return typeof v === "number" ? v : D.materials[v].emissivity; }
  function refreshEmissivity(S) {
    var N = S.rows * S.cols, nn = Float64Array.from(S.eps0), fac = new Float64Array(N).fill(S.d.stack_angle_factor), i;
    S.regions.forEach(function (r) {
      if (Object.prototype.hasOwnProperty.call(S.assign, r.name)) {
        var m = maskOf(S, r), v = surfaceValue(S.assign[r.name]);
        for (i = 0; i < N; i++) if (m[i]) nn[i] = v;
      }
    });
    S.regions.forEach(function (r) {
      if (r.view_angle_deg !== undefined && r.view_angle_deg !== null && S.angleFactor[+r.view_angle_deg] !== undefined) {
        var m = maskOf(S, r), f = S.angleFactor[+r.view_angle_deg];
        for (i = 0; i < N; i++) if (m[i]) fac[i] = f;
      }
    });
    for (i = 0; i < N; i++) {
      var e = nn[i] < 0.5 ? nn[i] : nn[i] * fac[i];
      if (e === S.epsUsed0[i]) { S.eps[i] = e; S.T[i] = S.T0[i]; S.changed[i] = 0; }
      else { S.eps[i] = e; S.T[i] = recomputed(S, i, S.epsUsed0[i], e); S.changed[i] = 1; }
    }
  }

  // ---------------------------------------------------------------- statistics
  function stats(S, m) {
    var N = S.rows * S.cols, px = 0, n = 0, w = 0, s = 0, mn = Infinity, mx = -Infinity, es = 0;
    for (var i = 0; i < N; i++) {
      if (!m[i]) continue;
      px++;
      var t = S.T[i];
      if (!isFinite(t)) continue;
      var k = S.cnt ? S.cnt[i] : 1;
      n++; w += k; s += k * t; es += S.eps[i];
      if (t < mn) mn = t; if (t > mx) mx = t;
    }
    return { pixels: px, valid_pixels: n, min_c: n ? mn : null, mean_c: n ? s / w : null, max_c: n ? mx : null,
             emissivity_mean: n ? es / n : null };
  }

  // ---------------------------------------------------------------- YAML text
  var RESERVED = /^(true|false|yes|no|on|off|null|y|n|~)$/i;
  function yScalar(v) {
    if (v === null || v === undefined) return "null";
    if (typeof v === "boolean") return v ? "true" : "false";
    if (typeof v === "number") {
      if (Number.isInteger(v)) return String(v);
      var s = String(v);
      return s.indexOf("e") < 0 ? s : v.toExponential().replace(/^(-?\d)e/, "$1.0e");
    }
    v = String(v);
    if (/^[A-Za-z_\/][A-Za-z0-9_.\/ -]*$/.test(v) && !/ $/.test(v) && !RESERVED.test(v)) return v;
    return JSON.stringify(v);
  }
  function yFlow(v) {
    if (Array.isArray(v)) return "[" + v.map(yFlow).join(", ") + "]";
    if (v && typeof v === "object") {
      return "{" + Object.keys(v).map(function (k) { return (/^\d+$/.test(k) ? k : yScalar(k)) + ": " + yFlow(v[k]); }).join(", ") + "}";
    }
    return yScalar(v);
  }
  // the regions block; unchanged regions keep their original lines (and comments)
  function regionsLines(S, span) {
    if (!S.regions.length) return ["regions: []"];
    var lines = D.config_text.split("\n"), dash = "  ", orig = [];
    if (span && span.items) {
      dash = new Array(span.dash_col - span.col + 1).join(" ");
      orig = span.items.map(function (it, k) { return { json: JSON.stringify((S.rawStack.regions || [])[k]), lines: lines.slice(it.start, it.end) }; });
    }
    var out = ["regions:"];
    S.regions.forEach(function (r) {
      var j = JSON.stringify(r), k;
      for (k = 0; k < orig.length; k++) if (orig[k] && orig[k].json === j) break;
      if (k < orig.length) {
        orig[k].lines.forEach(function (l, n) { out.push(n === 0 ? dash + l.slice(span.dash_col) : l.slice(span.col)); });
        orig[k] = null;
      } else out.push(dash + "- " + yFlow(r));
    });
    return out;
  }
  function emissivitySpec(S) {
    var names = Object.keys(S.assign);
    if (!names.length) return copy(S.emisDefault);
    var regs = {};
    S.regions.forEach(function (r) { if (names.indexOf(r.name) >= 0) regs[r.name] = S.assign[r.name]; });
    return { regions: regs, default: copy(S.emisDefault) };
  }
  function stackYaml(S) {
    var out = regionsLines(S);
    out.push("conditions:");
    out.push("  emissivity: " + yFlow(emissivitySpec(S)));
    if (S.reflChanged) out.push("  reflected_temperature_c: " + yFlow(S.refl));
    ["hotspots", "coldspots"].forEach(function (k) { if (S.spotsChanged[k]) out.push(k + ": " + yFlow(S.spots[k])); });
    return out.join("\n") + "\n";
  }
  function surveyYaml() {
    var lines = D.config_text.split("\n"), edits = [], fallback = false;
    function pad(n) { return new Array(n + 1).join(" "); }
    function put(span, newLines, col, at) {
      if (span) {
        if (!span.ok) { fallback = true; return; }
        edits.push({ at: span.start, del: span.end - span.start,
                     lines: [span.prefix + newLines[0]].concat(newLines.slice(1).map(function (l) { return pad(span.col) + l; })) });
      } else {
        edits.push({ at: at, del: 0, lines: newLines.map(function (l) { return pad(col) + l; }) });
      }
    }
    STACKS.forEach(function (S) {
      var sp = D.spans[S.d.index];
      if (!(S.regionsChanged || S.emisChanged || S.reflChanged || S.spotsChanged.hotspots || S.spotsChanged.coldspots)) return;
      if (!sp.item.ok) { fallback = true; return; }
      var cc = sp.item.child_col, end = sp.item.end;
      if (S.regionsChanged) put(sp.keys.regions, regionsLines(S, sp.keys.regions), cc, end);
      ["hotspots", "coldspots"].forEach(function (k) { if (S.spotsChanged[k]) put(sp.keys[k], [k + ": " + yFlow(S.spots[k])], cc, end); });
      var cond = {};
      if (S.emisChanged) cond.emissivity = emissivitySpec(S);
      if (S.reflChanged) cond.reflected_temperature_c = S.refl;
      var keys = Object.keys(cond);
      if (!keys.length) return;
      var cs = sp.keys.conditions;
      if (!cs) {
        put(null, ["conditions:"].concat(keys.map(function (k) { return "  " + k + ": " + yFlow(cond[k]); })), cc, end);
      } else if (cs.block && cs.ok) {
        keys.forEach(function (k) { put(sp.conditions[k], [k + ": " + yFlow(cond[k])], cs.child_col, cs.end); });
      } else {
        var whole = copy(S.rawStack.conditions || {});
        keys.forEach(function (k) { whole[k] = cond[k]; });
        put(cs, ["conditions: " + yFlow(whole)], cc, end);
      }
    });
    if (fallback) {
      var raw = copy(D.raw);
      STACKS.forEach(function (S) {
        var st = raw.stacks[S.d.index];
        st.regions = copy(S.regions);
        st.conditions = st.conditions || {};
        st.conditions.emissivity = emissivitySpec(S);
        if (S.reflChanged) st.conditions.reflected_temperature_c = S.refl;
        ["hotspots", "coldspots"].forEach(function (k) { if (S.spotsChanged[k]) st[k] = S.spots[k]; });
      });
      return "# written by irpipe inspect as JSON (a form of YAML): the original layout could not be edited in place\n" +
        JSON.stringify(raw, null, 2) + "\n";
    }
    edits.sort(function (a, b) { return b.at - a.at || a.del - b.del; });
    edits.forEach(function (e) { Array.prototype.splice.apply(lines, [e.at, e.del].concat(e.lines)); });
    return lines.join("\n");
  }

  // ---------------------------------------------------------------- region edits
  function stackOf(name) {
    var S = BY_NAME[name];
    if (!S) throw new Error("no stack named " + JSON.stringify(name) + "; stacks: " + STACKS.map(function (s) { return s.name; }).join(", "));
    return S;
  }
  function findRegion(S, name) {
    for (var i = 0; i < S.regions.length; i++) if (S.regions[i].name === name) return i;
    throw new Error("no region named " + JSON.stringify(name) + " in stack " + JSON.stringify(S.name));
  }
  function checkName(S, name, except) {
    if (typeof name !== "string" || !name.trim() || name !== name.trim()) throw new Error("a region name is a non-empty text without leading or trailing spaces");
    S.regions.forEach(function (r) { if (r.name === name && r !== except) throw new Error("region name " + JSON.stringify(name) + " is already used in this stack"); });
  }
  function normalise(spec) {
    var out = {}, k;
    for (k in spec) out[k] = copy(spec[k]);
    if (out.ellipse) {
      var e = ellipseOf(out);
      var ell = { center: [+e.center[0], +e.center[1]], radii: [+e.radii[0], +e.radii[1]] };
      var keys = Object.keys(out), o2 = {};
      keys.forEach(function (kk) { o2[kk] = kk === "ellipse" ? ell : out[kk]; });
      out = o2;
    }
    return out;
  }
  function touchesPixels(S, r) {
    return Object.prototype.hasOwnProperty.call(S.assign, r.name) || (r.view_angle_deg !== undefined && r.view_angle_deg !== null);
  }
  function addRegion(name, spec) {
    var S = stackOf(name);
    if (!spec || typeof spec !== "object") throw new Error("addRegion(stack, {name, rect|polygon|ellipse: ...})");
    var r = normalise(spec);
    var kinds = ["rect", "polygon", "ellipse"].filter(function (k) { return r[k] !== undefined; });
    if (kinds.length !== 1) throw new Error("give exactly one of rect, polygon, ellipse");
    checkName(S, r.name, null);
    var prob = geometryProblem(S, r);
    if (prob) throw new Error(prob);
    if (!maskOf(S, r).some(function (v) { return v; })) throw new Error("region " + JSON.stringify(r.name) + " covers no pixel");
    S.regions.push(r);
    S.regionsChanged = true;
    changed(S, false);
    return copy(r);
  }
  function setGeometry(S, r, geom) {
    var old = {}; ["rect", "polygon", "ellipse"].forEach(function (k) { if (r[k] !== undefined) { old[k] = r[k]; } });
    var trial = normalise(r);
    ["rect", "polygon", "ellipse"].forEach(function (k) { delete trial[k]; });
    for (var k in geom) trial[k] = geom[k];
    var prob = geometryProblem(S, trial);
    if (prob) throw new Error(prob);
    if (!maskOf(S, trial).some(function (v) { return v; })) throw new Error("the region would cover no pixel");
    var keys = Object.keys(r), kk;
    for (kk = 0; kk < keys.length; kk++) delete r[keys[kk]];
    for (kk in trial) r[kk] = trial[kk];
    S.regionsChanged = true;
    changed(S, touchesPixels(S, r));
  }
  function rename(S, oldName, newName) {
    var r = S.regions[findRegion(S, oldName)];
    if (r.mask) throw new Error("regions given as mask: are kept as they are");
    checkName(S, newName, r);
    r.name = newName;
    S.regions.forEach(function (o) { if (o.reference === oldName) o.reference = newName; });
    ["hotspots", "coldspots"].forEach(function (k) {
      var sp = S.spots[k]; if (!sp) return;
      if (sp.reference === oldName) { sp.reference = newName; S.spotsChanged[k] = true; }
      ["within", "exclude"].forEach(function (l) {
        if (Array.isArray(sp[l]) && sp[l].indexOf(oldName) >= 0) { sp[l] = sp[l].map(function (x) { return x === oldName ? newName : x; }); S.spotsChanged[k] = true; }
      });
    });
    if (S.refl && typeof S.refl === "object" && S.refl.reflector === oldName) { S.refl.reflector = newName; S.reflChanged = true; }
    if (Object.prototype.hasOwnProperty.call(S.assign, oldName)) {
      var a = {}; Object.keys(S.assign).forEach(function (k) { a[k === oldName ? newName : k] = S.assign[k]; });
      S.assign = a; S.emisChanged = true;
    }
    S.regionsChanged = true;
    changed(S, false);
  }
  function remove(S, name) {
    var i = findRegion(S, name), r = S.regions[i];
    if (S.refl && typeof S.refl === "object" && S.refl.reflector === name)
      throw new Error("region " + JSON.stringify(name) + " is the reflector of reflected_temperature_c; give a reflected temperature or another reflector first");
    var pix = touchesPixels(S, r);
    S.regions.splice(i, 1);
    S.regions.forEach(function (o) { if (o.reference === name) delete o.reference; });
    ["hotspots", "coldspots"].forEach(function (k) {
      var sp = S.spots[k]; if (!sp) return;
      if (sp.reference === name) { sp.reference = "median"; S.spotsChanged[k] = true; }
      ["within", "exclude"].forEach(function (l) {
        if (Array.isArray(sp[l]) && sp[l].indexOf(name) >= 0) {
          sp[l] = sp[l].filter(function (x) { return x !== name; });
          if (!sp[l].length) delete sp[l];
          S.spotsChanged[k] = true;
        }
      });
    });
    if (Object.prototype.hasOwnProperty.call(S.assign, name)) { delete S.assign[name]; S.emisChanged = true; }
    if (S.sel === r) S.sel = null;
    S.regionsChanged = true;
    changed(S, pix);
  }
  function setSurface(name, region, value) {
    var S = stackOf(name);
    findRegion(S, region);
    if (typeof value === "string" && !Object.prototype.hasOwnProperty.call(D.materials, value) && value.trim() !== "" && isFinite(Number(value)))
      value = Number(value);                      // a number typed as text
    if (value === null || value === undefined || value === "") delete S.assign[region];
    else if (typeof value === "number") {
      if (!(value > 0 && value <= 1)) throw new Error("emissivity " + value + " is not in (0, 1]" + (value > 1 && value <= 100 ? "; did you mean " + value / 100 + "?" : ""));
      S.assign[region] = value;
    } else if (typeof value === "string") {
      if (!Object.prototype.hasOwnProperty.call(D.materials, value)) throw new Error("material " + JSON.stringify(value) + " is not in the library");
      S.assign[region] = value;
    } else throw new Error("give a material name or a number in (0, 1]");
    S.emisChanged = true;
    changed(S, true);
  }

  // ---------------------------------------------------------------- drawing on the canvas
  function pointer(S, e) {
    var b = S.canvas.getBoundingClientRect();
    return { v: (e.clientY - b.top) / b.height * S.rows, u: (e.clientX - b.left) / b.width * S.cols };
  }
  function clampEdge(x, n) { return Math.min(n, Math.max(0, Math.round(x))); }
  function boxOf(S, a, b) {
    var r0 = clampEdge(Math.min(a.v, b.v), S.rows), r1 = clampEdge(Math.max(a.v, b.v), S.rows);
    var c0 = clampEdge(Math.min(a.u, b.u), S.cols), c1 = clampEdge(Math.max(a.u, b.u), S.cols);
    return [r0, c0, r1, c1];
  }
  function pixelOf(S, p) { return [Math.min(S.rows - 1, Math.max(0, Math.floor(p.v))), Math.min(S.cols - 1, Math.max(0, Math.floor(p.u)))]; }
  function draftSpec(S) {
    var d = S.draft; if (!d) return null;
    if (d.tool === "rect" || d.tool === "ellipse") {
      var q = boxOf(S, d.a, d.b);
      if (q[2] <= q[0] || q[3] <= q[1]) return null;
      if (d.tool === "rect") return { rect: q };
      return { ellipse: { center: [(q[0] + q[2] - 1) / 2, (q[1] + q[3] - 1) / 2], radii: [(q[2] - q[0]) / 2, (q[3] - q[1]) / 2] } };
    }
    var pts = d.pts.slice(); if (d.hover) pts.push(d.hover);
    return pts.length >= 3 ? { polygon: pts } : null;
  }
  function defaultName(S) {
    for (var k = 1; ; k++) { var n = "region-" + k; if (!S.regions.some(function (r) { return r.name === n; })) return n; }
  }
  function finishDraft(S) {
    var d = S.draft; S.draft = null;
    var spec = null;
    if (d && d.tool === "polygon") { if (d.pts.length >= 3) spec = { polygon: d.pts }; }
    else spec = d ? draftSpec(Object.assign({}, S, { draft: d })) : null;
    S.live.textContent = "";
    if (spec) {
      spec = Object.assign({ name: defaultName(S) }, spec);
      try { addRegion(S.name, spec); S.sel = S.regions[S.regions.length - 1]; say(S, "Added " + spec.name + ": type its name in the table."); }
      catch (err) { say(S, err.message); }
    }
    draw(S); fillTable(S);
  }
  function hit(S, p) {
    var px = pixelOf(S, p), i = px[0] * S.cols + px[1];
    for (var k = S.regions.length - 1; k >= 0; k--) if (maskOf(S, S.regions[k])[i]) return S.regions[k];
    return null;
  }
  function bbox(r) {
    if (r.rect) return r.rect.slice();
    if (r.ellipse) { var e = ellipseOf(r); return [e.center[0] - e.radii[0] + 0.5, e.center[1] - e.radii[1] + 0.5, e.center[0] + e.radii[0] + 0.5, e.center[1] + e.radii[1] + 0.5]; }
    if (r.polygon) { var rs = r.polygon.map(function (v) { return v[0]; }), cs = r.polygon.map(function (v) { return v[1]; });
      return [Math.min.apply(null, rs), Math.min.apply(null, cs), Math.max.apply(null, rs) + 1, Math.max.apply(null, cs) + 1]; }
    return null;
  }
  function moved(r, dr, dc) {
    if (r.rect) return { rect: [r.rect[0] + dr, r.rect[1] + dc, r.rect[2] + dr, r.rect[3] + dc] };
    if (r.ellipse) { var e = ellipseOf(r); return { ellipse: { center: [e.center[0] + dr, e.center[1] + dc], radii: e.radii.slice() } }; }
    return { polygon: r.polygon.map(function (v) { return [v[0] + dr, v[1] + dc]; }) };
  }
  function resized(r, p) {
    var b = bbox(r), r1 = Math.round(p.v), c1 = Math.round(p.u);
    if (r.rect) return { rect: [r.rect[0], r.rect[1], Math.max(r.rect[0] + 1, r1), Math.max(r.rect[1] + 1, c1)] };
    if (r.ellipse) { r1 = Math.max(b[0] + 1, r1); c1 = Math.max(b[1] + 1, c1);
      return { ellipse: { center: [(b[0] + r1 - 1) / 2, (b[1] + c1 - 1) / 2], radii: [(r1 - b[0]) / 2, (c1 - b[1]) / 2] } }; }
    var sr = (Math.max(b[0] + 1, r1) - b[0]) / (b[2] - b[0]), sc = (Math.max(b[1] + 1, c1) - b[1]) / (b[3] - b[1]);
    return { polygon: r.polygon.map(function (v) { return [Math.round(b[0] + (v[0] - b[0]) * sr), Math.round(b[1] + (v[1] - b[1]) * sc)]; }) };
  }
  function onDown(S, e) {
    if (e.button !== 0) return;
    var p = pointer(S, e);
    S.dragged = false;
    if (S.tool === "point") { S.press = { a: p, x: e.clientX, y: e.clientY }; e.preventDefault(); }
    else if (S.tool === "rect" || S.tool === "ellipse") { S.draft = { tool: S.tool, a: p, b: p }; e.preventDefault(); }
    else if (S.tool === "select") {
      var b = S.sel && bbox(S.sel);
      var box = S.canvas.getBoundingClientRect();
      if (b && !S.sel.mask && Math.abs(p.v - b[2]) <= 6 * S.rows / box.height && Math.abs(p.u - b[3]) <= 6 * S.cols / box.width) {
        S.grab = { mode: "resize", r: S.sel };
      } else {
        var r = hit(S, p); S.sel = r;
        if (r && !r.mask) S.grab = { mode: "move", r: r, a: p, orig: copy(r) };
        fillTable(S); draw(S);
      }
      e.preventDefault();
    }
  }
  function onMove(S, e) {
    var p = pointer(S, e), px = pixelOf(S, p);
    showReadout(S, px[0], px[1]);
    if (S.press && (e.buttons & 1) && Math.abs(e.clientX - S.press.x) + Math.abs(e.clientY - S.press.y) > 3) {
      S.draft = { tool: "rect", a: S.press.a, b: p };      // a drag in Read mode draws a rectangle
      S.press = null; S.dragged = true;
    }
    if (S.draft) {
      if (S.draft.tool === "polygon") S.draft.hover = px; else S.draft.b = p;
      liveStats(S); draw(S);
    } else if (S.grab) {
      var g = S.grab, geom = g.mode === "move" ? moved(g.orig, Math.round(p.v - g.a.v), Math.round(p.u - g.a.u)) : resized(g.r, p);
      var trial = Object.assign(normalise(g.r), geom);
      if (!geometryProblem(S, trial)) { ["rect", "polygon", "ellipse"].forEach(function (k) { delete g.r[k]; }); Object.assign(g.r, geom); g.dirty = true; }
      var st = stats(S, maskOf(S, g.r));
      S.live.textContent = "region " + g.r.name + ": " + st.pixels + " pixels, min " + fmt(st.min_c, 2) + ", mean " + fmt(st.mean_c, 2) + ", max " + fmt(st.max_c, 2) + " \u00b0C";
      draw(S);
    }
  }
  function onUp(S, e) {
    S.press = null;
    if (S.draft && S.draft.tool !== "polygon") { S.draft.b = pointer(S, e); finishDraft(S); }
    if (S.grab) {
      var g = S.grab; S.grab = null;
      if (g.dirty) { S.regionsChanged = true; changed(S, touchesPixels(S, g.r)); }
      S.live.textContent = "";
    }
  }
  function onClick(S, e) {
    var p = pointer(S, e), px = pixelOf(S, p);
    if (S.dragged) { S.dragged = false; return; }
    if (S.tool === "point") { S.pins.push(px); fillPins(S); draw(S); }
    else if (S.tool === "polygon") {
      if (!S.draft) S.draft = { tool: "polygon", pts: [] };
      var last = S.draft.pts[S.draft.pts.length - 1];
      if (!last || last[0] !== px[0] || last[1] !== px[1]) S.draft.pts.push(px);
      liveStats(S); draw(S);
    }
  }

  // ---------------------------------------------------------------- display
  function say(S, text) { S.msg.textContent = text; }
  function liveStats(S) {
    var spec = draftSpec(S);
    if (!spec) { S.live.textContent = "drawing: keep dragging (polygon: click 3 or more points, double-click or Enter to finish)"; return; }
    var st = stats(S, maskOf(S, spec));
    S.live.textContent = "drawing: " + st.pixels + " pixels, min " + fmt(st.min_c, 2) + ", mean " + fmt(st.mean_c, 2) + ", max " + fmt(st.max_c, 2) + " \u00b0C";
  }
  function readout(name, r, c) {
    var S = stackOf(name);
    if (!(Number.isInteger(r) && Number.isInteger(c) && r >= 0 && c >= 0 && r < S.rows && c < S.cols))
      throw new Error("pixel (" + r + ", " + c + ") is outside the " + S.rows + "x" + S.cols + " image");
    var p = r * S.cols + c, t = S.T[p];
    if (!isFinite(t)) return { temperature_c: null, emissivity: null, expanded_uncertainty_k: null };
    var u = S.U && !S.changed[p] && isFinite(S.U[p]) ? S.U[p] : null;
    return { temperature_c: t, emissivity: S.eps[p], expanded_uncertainty_k: u };
  }
  function readoutText(S, r, c) {
    var o = readout(S.name, r, c);
    var s = "row " + r + ", col " + c + ": " + (o.temperature_c === null ? "no valid value" :
      fmt(o.temperature_c, 2) + " \u00b0C, emissivity " + fmt(o.emissivity, 3) + ", U (k=2) " +
      (o.expanded_uncertainty_k === null ? (S.U && S.changed[r * S.cols + c] ? "run again" : "-") : fmt(o.expanded_uncertainty_k, 2) + " K"));
    if (S.frame > 0) { var t = frameData(S, S.frame - 1)[r * S.cols + c]; s += "; this frame " + fmt(t, 2) + " \u00b0C"; }
    return s;
  }
  function showReadout(S, r, c) { S.readout.textContent = readoutText(S, r, c); }
  function frameData(S, k) {
    if (S.frameCache[k]) return S.frameCache[k];
    var N = S.rows * S.cols, out = new Float32Array(N), off = k * N;
    for (var i = 0; i < N; i++) { var q = S.fq[off + i]; out[i] = q === 65535 ? NaN : S.qlo + q * S.qstep; }
    S.frameCache = {}; S.frameCache[k] = out;
    return out;
  }
  function paint(S) {
    var src = S.frame > 0 ? frameData(S, S.frame - 1) : S.T, N = S.rows * S.cols, px = S.img.data;
    var lo = S.lo, span = (S.hi - S.lo) || 1;
    for (var i = 0; i < N; i++) {
      var t = src[i], o = 4 * i;
      if (!isFinite(t)) { px[o] = 90; px[o + 1] = 160; px[o + 2] = 90; px[o + 3] = 255; continue; }
      var k = Math.round((t - lo) / span * 255); k = k < 0 ? 0 : k > 255 ? 255 : k;
      px[o] = LUT[3 * k]; px[o + 1] = LUT[3 * k + 1]; px[o + 2] = LUT[3 * k + 2]; px[o + 3] = 255;
    }
    S.offctx.putImageData(S.img, 0, 0);
    paintScale(S);
    draw(S);
  }
  function paintScale(S) {
    var c = S.scale, g = c.getContext("2d"), w = c.width;
    for (var x = 0; x < w; x++) { var k = Math.round(x / (w - 1) * 255); g.fillStyle = "rgb(" + LUT[3 * k] + "," + LUT[3 * k + 1] + "," + LUT[3 * k + 2] + ")"; g.fillRect(x, 0, 1, c.height); }
    S.loIn.value = S.lo.toFixed(2); S.hiIn.value = S.hi.toFixed(2);
  }
  function outline(g, S, r, sx, sy) {
    g.beginPath();
    if (r.rect) g.rect(r.rect[1] * sx, r.rect[0] * sy, (r.rect[3] - r.rect[1]) * sx, (r.rect[2] - r.rect[0]) * sy);
    else if (r.ellipse) { var e = ellipseOf(r); g.ellipse((e.center[1] + 0.5) * sx, (e.center[0] + 0.5) * sy, e.radii[1] * sx, e.radii[0] * sy, 0, 0, 2 * Math.PI); }
    else if (r.polygon) { r.polygon.forEach(function (v, k) { var x = (v[1] + 0.5) * sx, y = (v[0] + 0.5) * sy; if (k) g.lineTo(x, y); else g.moveTo(x, y); }); g.closePath(); }
  }
  function draw(S) {
    var g = S.ctx, W = S.canvas.width, H = S.canvas.height, sx = W / S.cols, sy = H / S.rows;
    g.imageSmoothingEnabled = false;
    g.drawImage(S.off, 0, 0, W, H);
    g.lineWidth = 1.5; g.font = "11px sans-serif";
    if (S.showFindings) S.d.findings.forEach(function (f) {
      if (!f.bbox) return;
      g.setLineDash([4, 3]); g.strokeStyle = f.kind === "cold" ? "#7fd3ff" : "#ffffff";
      g.strokeRect(f.bbox[1] * sx, f.bbox[0] * sy, (f.bbox[3] - f.bbox[1]) * sx, (f.bbox[2] - f.bbox[0]) * sy);
      g.setLineDash([]);
    });
    S.regions.forEach(function (r) {
      var b = bbox(r);
      g.strokeStyle = r === S.sel ? "#00e5ff" : "#ffffff";
      if (r.mask) {
        var ov = maskOverlay(S, r);
        if (ov) { g.globalAlpha = 0.35; g.drawImage(ov.canvas, 0, 0, W, H); g.globalAlpha = 1; b = ov.box; }
        if (!b) return;
      } else { outline(g, S, r, sx, sy); g.stroke(); }
      if (b) { g.fillStyle = r === S.sel ? "#00e5ff" : "#ffffff"; g.fillText(r.name, b[1] * sx + 2, b[0] * sy + 11); }
      if (r === S.sel && b) { g.fillStyle = "#00e5ff"; g.fillRect(b[3] * sx - 4, b[2] * sy - 4, 8, 8); }
    });
    var spec = draftSpec(S);
    if (S.draft && S.draft.tool === "polygon" && !spec && S.draft.pts.length) spec = { polygon: S.draft.pts.concat(S.draft.hover ? [S.draft.hover] : []) };
    if (spec) { g.strokeStyle = "#00ff88"; g.setLineDash([5, 3]); outline(g, S, spec, sx, sy); g.stroke(); g.setLineDash([]); }
    S.pins.forEach(function (p) { var x = (p[1] + 0.5) * sx, y = (p[0] + 0.5) * sy; g.strokeStyle = "#00ff88"; g.beginPath(); g.moveTo(x - 5, y); g.lineTo(x + 5, y); g.moveTo(x, y - 5); g.lineTo(x, y + 5); g.stroke(); });
  }
  // a region given as a mask image: a translucent overlay, made once
  function maskOverlay(S, r) {
    if (!S.fileMasks.has(r)) return null;
    if (S.overlays.has(r)) return S.overlays.get(r);
    var m = S.fileMasks.get(r), c = document.createElement("canvas"), box = [S.rows, S.cols, 0, 0];
    c.width = S.cols; c.height = S.rows;
    var g = c.getContext("2d"), img = g.createImageData(S.cols, S.rows);
    for (var i = 0; i < m.length; i++) if (m[i]) {
      img.data[4 * i] = img.data[4 * i + 1] = img.data[4 * i + 2] = img.data[4 * i + 3] = 255;
      var rr = Math.floor(i / S.cols), cc = i % S.cols;
      box[0] = Math.min(box[0], rr); box[1] = Math.min(box[1], cc); box[2] = Math.max(box[2], rr + 1); box[3] = Math.max(box[3], cc + 1);
    }
    g.putImageData(img, 0, 0);
    var ov = { canvas: c, box: box[2] > 0 ? box : null };
    S.overlays.set(r, ov);
    return ov;
  }
  function setZoom(S, z) {
    S.zoom = z;
    S.canvas.width = S.cols * z; S.canvas.height = S.rows * z;
    S.canvas.style.width = S.cols * z + "px"; S.canvas.style.height = S.rows * z + "px";
    S.ctx = S.canvas.getContext("2d");
    draw(S);
  }
  function geomText(r) {
    if (r.rect) return "rect " + r.rect.join(", ");
    if (r.ellipse) { var e = ellipseOf(r); return "ellipse " + [e.center[0], e.center[1], e.radii[0], e.radii[1]].join(", "); }
    if (r.polygon) return "polygon " + r.polygon.map(function (v) { return v[0] + " " + v[1]; }).join("; ");
    return "mask " + r.mask;
  }
  function parseGeom(text) {
    var m = /^\s*(rect|ellipse|polygon)\s+(.*)$/.exec(text);
    if (!m) throw new Error("write rect r0, c0, r1, c1 or ellipse row, col, row_radius, col_radius or polygon r c; r c; r c");
    var nums = function (s) { return s.split(/[\s,]+/).filter(Boolean).map(Number); };
    if (m[1] === "polygon") return { polygon: m[2].split(";").map(function (s) { var v = nums(s); if (v.length !== 2) throw new Error("polygon vertices are 'row col' separated by ;"); return v; }) };
    var v = nums(m[2]);
    if (v.length !== 4 || v.some(function (x) { return !isFinite(x); })) throw new Error(m[1] + " needs 4 numbers");
    return m[1] === "rect" ? { rect: v } : { ellipse: { center: [v[0], v[1]], radii: [v[2], v[3]] } };
  }
  function surfaceText(S) {
    var e = S.emisDefault;
    return typeof e === "object" ? (e.labels ? "label image " + e.labels : e.map ? "map " + e.map : "default") : String(e);
  }
  function fillTable(S) {
    var tb = S.tbody; tb.textContent = "";
    S.regions.forEach(function (r) {
      var st = stats(S, maskOf(S, r));
      var name = el("input", { cls: "name", type: "text" }); name.value = r.name;
      if (r.mask) name.disabled = true;
      name.addEventListener("change", function () { try { rename(S, r.name, name.value.trim()); say(S, ""); } catch (err) { say(S, err.message); name.value = r.name; } });
      var geom = el("input", { cls: "geom", type: "text" }); geom.value = geomText(r);
      if (r.mask) geom.disabled = true;
      geom.addEventListener("change", function () { try { setGeometry(S, r, parseGeom(geom.value)); say(S, ""); } catch (err) { say(S, err.message); geom.value = geomText(r); } });
      var sel = el("select");
      sel.appendChild(el("option", { value: "", text: "default (" + surfaceText(S) + ")" }));
      Object.keys(D.materials).sort().forEach(function (m) { sel.appendChild(el("option", { value: "m:" + m, text: m + " (" + D.materials[m].emissivity + ")" })); });
      sel.appendChild(el("option", { value: "n", text: "number:" }));
      var num = el("input", { cls: "num", type: "number", step: "0.01", min: "0.01", max: "1" });
      var a = S.assign[r.name];
      if (typeof a === "number") { sel.value = "n"; num.value = a; } else if (typeof a === "string") sel.value = "m:" + a; else sel.value = "";
      num.disabled = sel.value !== "n";
      function apply() {
        try {
          var v = sel.value === "" ? null : sel.value === "n" ? (num.value === "" ? null : Number(num.value)) : sel.value.slice(2);
          num.disabled = sel.value !== "n";
          if (sel.value === "n" && v === null) return;
          setSurface(S.name, r.name, v); say(S, "");
        } catch (err) { say(S, err.message); }
      }
      sel.addEventListener("change", apply); num.addEventListener("change", apply);
      var del = el("button", { type: "button", text: "delete" });
      del.addEventListener("click", function () { try { remove(S, r.name); say(S, ""); } catch (err) { say(S, err.message); } });
      var row = el("tr", null, el("td", null, name), el("td", null, geom), el("td", null, sel, num),
        el("td", { cls: "n", text: String(st.pixels) }), el("td", { cls: "n", text: fmt(st.min_c, 2) }),
        el("td", { cls: "n", text: fmt(st.mean_c, 2) }), el("td", { cls: "n", text: fmt(st.max_c, 2) }),
        el("td", { cls: "n", text: fmt(st.emissivity_mean, 3) }), el("td", null, del));
      if (r === S.sel) row.style.background = "#e3f6fa";
      tb.appendChild(row);
    });
    S.yaml.value = stackYaml(S);
  }
  function fillPins(S) {
    var ul = S.pinList; ul.textContent = "";
    S.pins.forEach(function (p, k) {
      var x = el("button", { type: "button", text: "x" });
      x.addEventListener("click", function () { S.pins.splice(k, 1); fillPins(S); draw(S); });
      ul.appendChild(el("li", null, readoutText(S, p[0], p[1]) + " ", x));
    });
  }
  function changed(S, pixels) {
    if (pixels) refreshEmissivity(S);
    if (S.built) { if (pixels) paint(S); else draw(S); fillTable(S); fillPins(S); }
  }
  function autoRange(S) {
    var v = [], N = S.T.length, step = Math.max(1, Math.floor(N / 20000));
    for (var i = 0; i < N; i += step) if (isFinite(S.T[i])) v.push(S.T[i]);
    v.sort(function (a, b) { return a - b; });
    if (!v.length) { S.lo = 0; S.hi = 1; return; }
    S.lo = v[Math.floor(0.01 * (v.length - 1))]; S.hi = v[Math.ceil(0.99 * (v.length - 1))];
    if (S.hi <= S.lo) S.hi = S.lo + 1;
  }

  // ---------------------------------------------------------------- building a stack
  function makeStack(d) {
    var N = d.rows * d.cols, raw = D.raw.stacks[d.index] || {};
    var S = { d: d, name: d.name, rows: d.rows, cols: d.cols, N: N };
    S.T0 = f32(d.temperature); S.T = Float64Array.from(S.T0);
    S.U = d.uncertainty ? f32(d.uncertainty) : null;
    S.cnt = d.counts ? (d.count_bits === 32 ? new Uint32Array(bytes(d.counts).buffer) : u16(d.counts)) : null;
    S.epsUsed0 = field(d.emissivity_used, N); S.eps = Float64Array.from(S.epsUsed0);
    S.eps0 = field(d.emissivity_default, N);
    S.changed = new Uint8Array(N);
    S.t0 = d.g_table.t0_k; S.tstep = d.g_table.step_k; S.G = f64(d.g_table.g);
    S.grefl = d.g_refl_mean; S.greflFrames = d.g_refl_frames || null;
    S.angleFactor = {}; Object.keys(d.angle_factors).forEach(function (k) { S.angleFactor[+k] = d.angle_factors[k]; });
    if (d.frames_q) { S.fq = u16(d.frames_q.data); S.nq = d.frames_q.count; S.qlo = d.frames_q.lo; S.qstep = d.frames_q.step; }
    S.frameCache = {};
    S.rawStack = copy(raw);
    S.regions = copy(raw.regions || []);
    S.fileMasks = new WeakMap(); S.overlays = new WeakMap();
    S.regions.forEach(function (r) {
      if (r.mask && d.masks[r.name]) {
        var b = bytes(d.masks[r.name]), m = new Uint8Array(N);
        for (var i = 0; i < N; i++) m[i] = (b[i >> 3] >> (7 - (i & 7))) & 1;
        S.fileMasks.set(r, m);
      }
    });
    var own = raw.conditions || {}, top = D.raw.conditions || {};
    var emis = own.emissivity !== undefined ? own.emissivity : top.emissivity;
    if (emis && typeof emis === "object" && emis.regions) { S.assign = copy(emis.regions); S.emisDefault = copy(emis.default); }
    else { S.assign = {}; S.emisDefault = copy(emis); }
    S.refl = copy(own.reflected_temperature_c !== undefined ? own.reflected_temperature_c : top.reflected_temperature_c);
    S.spots = { hotspots: copy(raw.hotspots || null), coldspots: copy(raw.coldspots || null) };
    S.spotsChanged = { hotspots: false, coldspots: false };
    S.regionsChanged = S.emisChanged = S.reflChanged = false;
    S.pins = []; S.tool = "point"; S.frame = 0; S.showFindings = true;
    return S;
  }
  function buildStack(S, host) {
    var d = S.d;
    var sec = el("section", { cls: "stack", id: "stack-" + (d.index + 1) });
    var info = el("p", { cls: "muted", text: d.rows + " x " + d.cols + " pixels, " + d.frames + " frame(s)" +
      (d.frames_q && d.frames_q.count < d.frames ? ", " + d.frames_q.count + " of them carried for the frame slider" : "") +
      (d.plan ? "; correction plan " + d.plan : "") });
    var tools = el("div", { cls: "bar" }, el("h2", { text: S.name }));
    var toolButtons = {};
    [["point", "Read"], ["rect", "Rectangle"], ["ellipse", "Ellipse"], ["polygon", "Polygon"], ["select", "Move / resize"]].forEach(function (t) {
      var b = el("button", { type: "button", text: t[1], "data-tool": t[0] });
      b.addEventListener("click", function () {
        S.tool = t[0]; S.draft = null; S.live.textContent = "";
        Object.keys(toolButtons).forEach(function (k) { toolButtons[k].className = k === t[0] ? "on" : ""; });
        draw(S);
      });
      toolButtons[t[0]] = b; tools.appendChild(b);
    });
    toolButtons.point.className = "on";
    var zoom = el("select", { "aria-label": "zoom" });
    // default zoom: the largest whole factor that fits the window (at least 1 CSS px per pixel)
    var z0 = Math.max(1, Math.min(8, Math.floor(Math.min((window.innerWidth - 60) / S.cols, (window.innerHeight - 140) / S.rows))));
    [1, 2, 3, 4, 5, 6, 7, 8, 10, 12, 16].forEach(function (z) { zoom.appendChild(el("option", { value: String(z), text: z + "x" })); });
    zoom.value = String(z0);
    zoom.addEventListener("change", function () { setZoom(S, +zoom.value); });
    tools.appendChild(el("label", null, " zoom ", zoom));
    var fr = null;
    if (d.frames_q) {
      fr = el("input", { type: "range", min: "0", max: String(d.frames_q.count), value: "0", step: "1", "aria-label": "frame" });
      var frl = el("span", { text: "mean of all frames" });
      fr.addEventListener("input", function () {
        S.frame = +fr.value;
        frl.textContent = S.frame === 0 ? "mean of all frames" : "frame " + d.frame_numbers[S.frame - 1] + " of " + d.frames;
        paint(S);
      });
      tools.appendChild(el("label", null, " frame ", fr, " ", frl));
    }
    var fcb = el("input", { type: "checkbox" }); fcb.checked = true;
    fcb.addEventListener("change", function () { S.showFindings = fcb.checked; draw(S); });
    tools.appendChild(el("label", null, fcb, " findings"));
    var canvas = el("canvas", { cls: "image", "data-stack": S.name });
    S.canvas = canvas;
    S.off = document.createElement("canvas"); S.off.width = S.cols; S.off.height = S.rows;
    S.offctx = S.off.getContext("2d"); S.img = S.offctx.createImageData(S.cols, S.rows);
    canvas.addEventListener("mousedown", function (e) { onDown(S, e); });
    canvas.addEventListener("mousemove", function (e) { onMove(S, e); });
    window.addEventListener("mouseup", function (e) { if (S.draft || S.grab || S.press) onUp(S, e); });
    canvas.addEventListener("click", function (e) { onClick(S, e); });
    canvas.addEventListener("dblclick", function (e) { if (S.draft && S.draft.tool === "polygon") { e.preventDefault(); S.draft.hover = null; finishDraft(S); } });
    canvas.addEventListener("mouseleave", function () { S.readout.textContent = ""; });
    var scale = el("canvas", { cls: "scalebar", width: "260", height: "14" });
    S.scale = scale;
    S.loIn = el("input", { cls: "num", type: "number", step: "0.1", "aria-label": "lower limit" });
    S.hiIn = el("input", { cls: "num", type: "number", step: "0.1", "aria-label": "upper limit" });
    function typed() { var a = parseFloat(S.loIn.value), b = parseFloat(S.hiIn.value); if (isFinite(a) && isFinite(b) && b > a) { S.lo = a; S.hi = b; paint(S); } }
    S.loIn.addEventListener("change", typed); S.hiIn.addEventListener("change", typed);
    scale.addEventListener("mousedown", function (e) {
      var x0 = e.clientX, y0 = e.clientY, lo = S.lo, hi = S.hi, w = scale.getBoundingClientRect().width;
      function mv(ev) {
        var span = hi - lo, shift = -(ev.clientX - x0) / w * span, grow = Math.exp((ev.clientY - y0) / 60);
        var mid = (lo + hi) / 2 + shift, half = span / 2 * grow;
        S.lo = mid - half; S.hi = mid + half; paint(S);
      }
      function up() { window.removeEventListener("mousemove", mv); window.removeEventListener("mouseup", up); }
      window.addEventListener("mousemove", mv); window.addEventListener("mouseup", up);
      e.preventDefault();
    });
    var fit = el("button", { type: "button", text: "fit" });
    fit.addEventListener("click", function () { autoRange(S); paint(S); });
    var scaleRow = el("div", { cls: "bar" }, "colour scale \u00b0C ", S.loIn, scale, S.hiIn, fit,
      el("span", { cls: "muted", text: "drag the bar sideways to shift, up/down to widen" }));
    S.readout = el("div", { cls: "readout" });
    S.live = el("div", { cls: "live" });
    S.msg = el("div", { cls: "msg" });
    var imgcol = el("div", { cls: "imgcol" }, tools, el("div", { cls: "wrap" }, canvas), scaleRow, S.readout, S.live, S.msg, info);
    S.pinList = el("ul", { cls: "findings" });
    S.tbody = el("tbody");
    var table = el("table", null, el("thead", null, el("tr", null,
      el("th", { text: "region" }), el("th", { text: "where (rows, cols)" }), el("th", { text: "surface" }),
      el("th", { text: "pixels" }), el("th", { text: "min \u00b0C" }), el("th", { text: "mean \u00b0C" }),
      el("th", { text: "max \u00b0C" }), el("th", { text: "emissivity" }), el("th"))), S.tbody);
    var finds = el("ul", { cls: "findings" });
    d.findings.forEach(function (f) {
      finds.appendChild(el("li", { text: (f.kind === "cold" ? "cold" : "warm") + " area of " + f.area_px + " px around row " + f.row + ", col " + f.col +
        " (frame " + f.frame + "): " + fmt(f.peak_c, 1) + " \u00b0C, " + fmt(f.delta_k, 1) + " K from reference " + (f.reference === null || f.reference === undefined ? "-" : f.reference) }));
    });
    d.electrical.forEach(function (c) {
      finds.appendChild(el("li", { text: "component " + c.region + ": " + c.severity + " (priority " + c.priority + "), " + fmt(c.rise_over_reference_k, 1) + " K over its reference" }));
    });
    if (!d.findings.length && !d.electrical.length) finds.appendChild(el("li", { text: "none" }));
    S.yaml = el("textarea", { readonly: "readonly", "aria-label": "YAML of this stack" });
    var cp = el("button", { type: "button", text: "copy" });
    cp.addEventListener("click", function () { S.yaml.select(); try { document.execCommand("copy"); } catch (e) { /* select is enough */ } });
    var side = el("div", { cls: "side" },
      el("h3", { text: "Regions (table statistics are over the mean frame; min and max of the per-pixel means)" }), table,
      el("p", { cls: "muted", text: "Surface: a material from the library, or a typed emissivity (its standard uncertainty is uncertainty.emissivity). " +
        "A later region in the list wins where regions overlap. Temperatures of re-assigned pixels are recomputed here; their uncertainty needs a new run." }),
      el("h3", { text: "Pinned readings (click the image with Read)" }), S.pinList,
      el("h3", { text: "Findings of the run" }), finds,
      el("h3", { text: "YAML of this stack's regions and emissivity" }), S.yaml, cp);
    sec.appendChild(el("div", { cls: "cols" }, imgcol, side));
    host.appendChild(sec);
    autoRange(S);
    setZoom(S, z0);
    S.built = true;
    paint(S); fillTable(S);
  }

  function init() {
    var app = document.getElementById("app");
    app.textContent = "";
    if (D.title) document.title = D.title + " - irpipe inspect";
    // a compact head, so that the first image sits near the top of the window
    var top = el("div", { cls: "top" });
    var dl = el("button", { type: "button", text: "Download the updated survey file" });
    dl.addEventListener("click", function () {
      var blob = new Blob([surveyYaml()], { type: "text/yaml" });
      var a = el("a", { href: URL.createObjectURL(blob), download: D.config_name.replace(/\.ya?ml$/i, "") + ".edited.yaml" });
      document.body.appendChild(a); a.click(); a.remove();
    });
    top.appendChild(el("div", { cls: "head" }, el("h1", { text: D.title || D.config_name }),
      el("span", { cls: "muted", text: D.site ? D.site + " \u00b7 " + D.config_name : D.config_name }), dl,
      el("span", { cls: "muted", text: "save it beside the original " + D.config_name + " (its paths are relative to that folder)" })));
    var about = el("details", { cls: "about" }, el("summary", { text: "About this page: reading, drawing, writing back" }));
    var notes = el("ul", { cls: "notes" });
    D.notes.forEach(function (n) { notes.appendChild(el("li", { text: n })); });
    about.appendChild(notes);
    about.appendChild(el("p", { text: "Point at an image to read row, column, temperature, the emissivity used at that pixel and the expanded uncertainty (k = 2), " +
      "all of the mean frame. Read mode: a click pins a reading, a drag draws a rectangle. How a drag becomes a region: a rectangle's corners snap to the nearest pixel edges (rect [row0, col0, row1, col1], " +
      "half-open: rows row0 to row1-1); an ellipse fills the dragged box, with centre and radii in pixel-centre coordinates; a polygon's vertices are the centres of the clicked pixels " +
      "(double-click or Enter to close it, Escape to cancel). A pixel belongs to a polygon when its centre is inside or on the outline, to an ellipse when its centre is inside, as irpipe run counts it." }));
    about.appendChild(el("p", { text: "The downloaded survey file must be saved beside the original " + D.config_name + ": its file paths are relative to that folder and stay valid only there. " +
      "Only the regions, the emissivity and the keys that name a renamed or deleted region are rewritten; comments and the order of everything else are kept." }));
    top.appendChild(about);
    app.appendChild(top);
    D.stacks.forEach(function (d) { var S = makeStack(d); STACKS.push(S); BY_NAME[S.name] = S; });
    STACKS.forEach(function (S) { buildStack(S, app); });
    document.addEventListener("keydown", function (e) {
      STACKS.forEach(function (S) {
        if (S.draft && S.draft.tool === "polygon") {
          if (e.key === "Enter") { S.draft.hover = null; finishDraft(S); }
          else if (e.key === "Escape") { S.draft = null; S.live.textContent = ""; draw(S); }
        }
      });
    });
  }

  api.stacks = function () { return STACKS.map(function (S) { return S.name; }); };
  api.readout = readout;
  api.addRegion = function (stack, spec) { var r = addRegion(stack, spec); var S = stackOf(stack); if (S.built) fillTable(S); return r; };
  api.regions = function (stack) { return copy(stackOf(stack).regions); };
  api.setSurface = setSurface;
  api.surveyYaml = surveyYaml;
  api.regionStats = function (stack, region) { var S = stackOf(stack); return stats(S, maskOf(S, S.regions[findRegion(S, region)])); };
  api.renameRegion = function (stack, oldName, newName) { rename(stackOf(stack), oldName, newName); };
  api.deleteRegion = function (stack, name) { remove(stackOf(stack), name); };
  api.mask = function (stack, spec) { var S = stackOf(stack); return Array.from(maskOf(S, normalise(spec))); };

  try { init(); resolveReady(true); }
  catch (err) {
    var app = document.getElementById("app");
    app.textContent = "";
    app.appendChild(el("p", { cls: "msg", text: "This page could not start: " + err.message }));
    rejectReady(err);
  }
})();
