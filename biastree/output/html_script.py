"""Style and script of the HTML review page (``biastree.output.html``).

Plain ES5-level JavaScript, no library: the page must open from disk in any
browser without a network.  It reads the JSON object in ``<script id=data>``
and builds the tables (sortable, paged, SI-formatted), the filters, the tree
outline and each failing load's explanation on demand.
"""

STYLE = """
*{box-sizing:border-box}
body{font-family:Helvetica,Arial,sans-serif;margin:0;color:#1c2833;background:#fff}
header{background:#263238;color:#fff;padding:.5em 1.2em;display:flex;flex-wrap:wrap;align-items:baseline;gap:.4em 1.5em}
header h1{font-size:1.25em;margin:0;font-weight:600}
nav a{color:#cfd8dc;margin-right:1em;text-decoration:none;font-size:.9em} nav a:hover{color:#fff;text-decoration:underline}
main{padding:0 1.2em 2em;max-width:110em}
h2{font-size:1.1em;margin:1.2em 0 .4em;border-bottom:1px solid #cfd8dc;padding-bottom:.15em}
.verdict{font-size:1.15em;margin:.7em 0 .4em} .big{font-size:1.3em;font-weight:bold;margin-right:.3em}
.facts{display:flex;flex-wrap:wrap;gap:.3em 1.6em;font-size:.88em}
.facts div{display:flex;flex-direction:column} .facts b{font-weight:normal;color:#607d8b;font-size:.85em}
.src{font-size:.8em;color:#607d8b;margin:.4em 0}
.pass{color:%(pass)s;font-weight:bold} .fail{color:%(fail)s;font-weight:bold}
table{border-collapse:collapse;font-size:.85em;margin:.3em 0}
th,td{padding:.2em .55em;border-bottom:1px solid #eceff1;white-space:nowrap;text-align:left}
th{background:#eceff1;position:sticky;top:0} th.sort{cursor:pointer;user-select:none}
th.sort:after{content:" \\2195";color:#90a4ae} th.asc:after{content:" \\25B2";color:#263238} th.desc:after{content:" \\25BC";color:#263238}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}
tr.failrow td{background:#fdf0ee}
.controls{display:flex;flex-wrap:wrap;gap:.5em;align-items:center;margin:.4em 0}
.controls input{width:18em;padding:.25em} .controls select,.controls button{padding:.2em}
.hint{color:#607d8b;font-size:.85em}
.pager{font-size:.85em;margin:.3em 0;display:flex;gap:.6em;align-items:center}
.chip{display:inline-block;background:#eceff1;border-radius:.8em;padding:0 .6em;margin-left:.4em;font-size:.85em}
a.link{color:#1a5276;cursor:pointer;text-decoration:none} a.link:hover{text-decoration:underline}
#why{border:2px solid %(fail)s;border-radius:4px;padding:.3em 1em .8em;margin:.8em 0;background:#fffaf9}
#why h3{margin:.4em 0}
.terms td{padding:.1em .5em} .bar{height:.8em;display:inline-block;vertical-align:middle}
.bar.up{background:#5c6bc0} .bar.down{background:repeating-linear-gradient(90deg,#ef6c00 0 4px,#ffcc80 4px 6px)}
#outline ul{list-style:none;margin:0;padding-left:1.3em} #outline>ul{padding-left:0}
#outline{font-size:.88em} #outline li{margin:.12em 0;white-space:nowrap}
.tog{display:inline-block;width:1.2em;cursor:pointer;color:#455a64;border:0;background:none;padding:0}
.info{color:#607d8b;margin-left:.5em}
#diagram{border:1px solid #cfd8dc;height:75vh;overflow:hidden;cursor:grab;background:#fff}
#diagram svg{width:100%%;height:100%%}
figure.plot{margin:.5em 0 1.5em} figure.plot svg{max-width:100%%;height:auto} figcaption{font-size:.85em;color:#455a64}
table.plain td{white-space:normal}
.caution{margin-top:2em;padding:.8em;border-left:4px solid #455a64;background:#f3f5f6;font-size:.85em}
"""

SCRIPT = r"""
(function () {
'use strict';
var D = JSON.parse(document.getElementById('data').textContent);
var L = D.loads, M = D.mirrors, nL = L.name.length, nM = M.name.length;
var PRE = ['a', 'f', 'p', 'n', '\u00b5', 'm', '', 'k', 'M', 'G', 'T'];
function esc(s) { return String(s).replace(/[&<>"]/g, function (c) { return {'&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;'}[c]; }); }
function g(x, d) { return String(Number(x.toPrecision(d))); }
function si(v, unit, d) {
  if (v === null || v === undefined) return '\u221e';
  if (v === 0) return '0 ' + unit;
  d = d || 3;
  var k = Math.min(4, Math.max(-6, Math.floor(Math.log10(Math.abs(v)) / 3)));
  var t = g(v / Math.pow(1000, k), d);
  if (k < 4 && Math.abs(parseFloat(t)) >= 1000) { k += 1; t = g(v / Math.pow(1000, k), d); }
  return t + '\u00a0' + PRE[k + 6] + unit;
}
function pct(x, dec) { if (x === null) return '\u2014'; var p = (x * 100).toFixed(dec === undefined ? 3 : dec); return (x >= 0 ? '+' : '') + p + '%'; }
function $(id) { return document.getElementById(id); }

// --- tree structure ------------------------------------------------------
var kidsM = [], kidsL = [], below = [], failBelow = [];
for (var m = 0; m < nM; m++) { kidsM.push([]); kidsL.push([]); below.push(0); failBelow.push(0); }
for (m = 1; m < nM; m++) if (M.parent[m] >= 0) kidsM[M.parent[m]].push(m);
for (var i = 0; i < nL; i++) { kidsL[L.mirror[i]].push(i); below[L.mirror[i]] += 1; if (!L.pass[i]) failBelow[L.mirror[i]] += 1; }
for (m = nM - 1; m > 0; m--) { var p = M.parent[m]; if (p >= 0) { below[p] += below[m]; failBelow[p] += failBelow[m]; } }
function path(i) { var out = [L.name[i]], m = L.mirror[i]; while (m >= 0) { out.unshift(M.name[m]); m = M.parent[m]; } out.unshift('reference'); return out; }

// --- filters -----------------------------------------------------------
var state = {q: '', verdict: 'all', cond: '', sub: -1};
function inSubtree() {
  var mark = new Uint8Array(nM);
  for (var m = 0; m < nM; m++) mark[m] = (m === state.sub || (M.parent[m] >= 0 && mark[M.parent[m]])) ? 1 : 0;
  return mark;
}
function loadRows() {
  var q = state.q.toLowerCase(), mark = state.sub >= 0 ? inSubtree() : null, out = [];
  var cond = state.cond === '' ? -1 : Number(state.cond);
  for (var i = 0; i < nL; i++) {
    if (state.verdict === 'fail' && L.pass[i]) continue;
    if (state.verdict === 'pass' && !L.pass[i]) continue;
    if (mark && !mark[L.mirror[i]]) continue;
    if (cond >= 0 && L.cond_at[i] !== cond) continue;
    if (q && L.name[i].toLowerCase().indexOf(q) < 0 && M.name[L.mirror[i]].toLowerCase().indexOf(q) < 0) continue;
    out.push(i);
  }
  return out;
}
function mirrorRows() {
  var q = state.q.toLowerCase(), mark = state.sub >= 0 ? inSubtree() : null, out = [];
  for (var m = 0; m < nM; m++) {
    if (mark && !mark[m]) continue;
    if (q && M.name[m].toLowerCase().indexOf(q) < 0) continue;
    out.push(m);
  }
  return out;
}

// --- a sortable, paged table ---------------------------------------------
function Table(host, cols, rowClass, size) {
  this.host = host; this.cols = cols; this.rowClass = rowClass; this.size = size || 50;
  this.rows = []; this.page = 0; this.col = -1; this.asc = true;
  var self = this, head = '';
  cols.forEach(function (c, k) { head += '<th class="sort' + (c.num ? ' num' : '') + '" data-col="' + k + '">' + c.head + '</th>'; });
  host.innerHTML = '<div class="pager"></div><table class="data"><thead><tr>' + head + '</tr></thead><tbody></tbody></table>';
  host.querySelectorAll('th').forEach(function (th) {
    th.addEventListener('click', function () { self.sortBy(Number(th.dataset.col)); });
  });
  host.querySelector('.pager').addEventListener('click', function (e) {
    var t = e.target;
    if (t.dataset.page === 'prev') self.page = Math.max(0, self.page - 1);
    else if (t.dataset.page === 'next') self.page = Math.min(self.pages() - 1, self.page + 1);
    else return;
    self.draw();
  });
  host.querySelector('.pager').addEventListener('change', function (e) {
    if (e.target.tagName === 'SELECT') { self.size = Number(e.target.value); self.page = 0; self.draw(); }
  });
}
Table.prototype.pages = function () { return Math.max(1, Math.ceil(this.rows.length / this.size)); };
Table.prototype.set = function (rows) { this.rows = rows; this.page = 0; if (this.col >= 0) this.order(); this.draw(); };
Table.prototype.order = function () {
  var key = this.cols[this.col].key, sign = this.asc ? 1 : -1;
  this.rows.sort(function (a, b) {
    var x = key(a), y = key(b);
    if (x === y) return a - b;
    if (x === null) return 1; if (y === null) return -1;
    return (x < y ? -1 : 1) * sign;
  });
};
Table.prototype.sortBy = function (k) {
  this.asc = this.col === k ? !this.asc : true; this.col = k;
  this.host.querySelectorAll('th').forEach(function (th, j) { th.classList.remove('asc', 'desc'); if (j === k) th.classList.add(this.asc ? 'asc' : 'desc'); }, this);
  this.order(); this.page = 0; this.draw();
};
Table.prototype.draw = function () {
  var start = this.page * this.size, rows = this.rows.slice(start, start + this.size), cols = this.cols, rc = this.rowClass, h = [];
  rows.forEach(function (r) {
    h.push('<tr' + (rc && rc(r) ? ' class="' + rc(r) + '"' : '') + ' data-row="' + r + '">');
    cols.forEach(function (c) { h.push('<td' + (c.num ? ' class="num"' : '') + '>' + c.cell(r) + '</td>'); });
    h.push('</tr>');
  });
  this.host.querySelector('tbody').innerHTML = h.join('');
  var sizes = [10, 25, 50, 100, 500].map(function (s) { return '<option' + (s === this.size ? ' selected' : '') + '>' + s + '</option>'; }, this).join('');
  this.host.querySelector('.pager').innerHTML = this.rows.length <= 10 ? '' :
    '<button data-page="prev"' + (this.page ? '' : ' disabled') + '>\u25c0 prev</button><span>page ' + (this.page + 1) + ' of ' + this.pages() +
    '</span><button data-page="next"' + (this.page + 1 < this.pages() ? '' : ' disabled') + '>next \u25b6</button>' +
    '<label>rows <select>' + sizes + '</select></label>';
};

// --- the load tables -------------------------------------------------------
function verdictCell(i) { return L.pass[i] ? '<span class="pass">PASS</span>' : '<a class="fail" href="#why" data-why="' + i + '">FAIL</a>'; }
function num(v) { return v === null ? Infinity : v; }
var loadCols = [
  {head: 'load', key: function (i) { return L.name[i]; }, cell: function (i) { return esc(L.name[i]); }},
  {head: '\u00d7', num: 1, key: function (i) { return L.count[i]; }, cell: function (i) { return L.count[i]; }},
  {head: 'mirror', key: function (i) { return M.name[L.mirror[i]]; }, cell: function (i) { return '<a class="link" data-sub="' + L.mirror[i] + '">' + esc(M.name[L.mirror[i]]) + '</a>'; }},
  {head: 'target', num: 1, key: function (i) { return L.target[i]; }, cell: function (i) { return si(L.target[i], 'A', 4); }},
  {head: 'delivered', num: 1, key: function (i) { return L.delivered[i]; }, cell: function (i) { return si(L.delivered[i], 'A', 6); }},
  {head: 'error', num: 1, key: function (i) { return L.error[i]; }, cell: function (i) { return pct(L.error[i]); }},
  {head: 'worst error', num: 1, key: function (i) { return L.worst[i]; }, cell: function (i) { return pct(L.worst[i]); }},
  {head: 'budget', num: 1, key: function (i) { return L.tolerance[i]; }, cell: function (i) { return '\u00b1' + g(L.tolerance[i] * 100, 3) + '%'; }},
  {head: 'margin', num: 1, key: function (i) { return L.margin[i]; }, cell: function (i) { return pct(L.margin[i]); }},
  {head: 'compliance', num: 1, key: function (i) { return L.compliance[i]; }, cell: function (i) { return si(L.compliance[i], 'V', 4); }},
  {head: 'Rout', num: 1, key: function (i) { return num(L.rout[i]); }, cell: function (i) { return si(L.rout[i], '\u03a9', 4); }}
];
if (L.cond_worst) loadCols.push({head: 'worst condition', key: function (i) { return L.cond_worst[i]; },
  cell: function (i) { return pct(L.cond_worst[i]) + ' <span class="hint">' + esc(D.conditions[L.cond_at[i]]) + '</span>'; }});
if (L.tempco) loadCols.push({head: 'tempco ppm/K', num: 1, key: function (i) { return L.tempco[i]; },
  cell: function (i) { return L.tempco[i] === null ? '\u2014' : L.tempco[i].toFixed(1); }});
if (L.ksigma) loadCols.push({head: g(D.k_sigma, 3) + '\u03c3', num: 1, key: function (i) { return L.ksigma[i]; },
  cell: function (i) { return g(L.ksigma[i] * 100, 3) + '%'; }});
loadCols.push({head: 'verdict', key: function (i) { return L.pass[i] ? 'pass' : 'fail'; }, cell: verdictCell});
function failRow(i) { return L.pass[i] ? '' : 'failrow'; }

var loads = new Table($('load-table'), loadCols, failRow, 50);
var worst = new Table($('worst-table'), loadCols, failRow, 10);
var all = []; for (i = 0; i < nL; i++) all.push(i);
all.sort(function (a, b) { return (L.pass[a] - L.pass[b]) || (L.margin[a] - L.margin[b]) || (a - b); });
worst.set(all.slice(0, 10));

var mirrorCols = [
  {head: 'mirror', key: function (m) { return M.name[m]; }, cell: function (m) { return '<a class="link" data-sub="' + m + '">' + esc(M.name[m]) + '</a>'; }},
  {head: 'fed by', key: function (m) { return M.parent[m] >= 0 ? M.name[M.parent[m]] : 'reference'; }, cell: function (m) { return esc(M.parent[m] >= 0 ? M.name[M.parent[m]] : 'reference'); }},
  {head: 'level', num: 1, key: function (m) { return M.depth[m]; }, cell: function (m) { return M.depth[m] + 1; }},
  {head: 'device', key: function (m) { return M.device[m]; }, cell: function (m) { return esc(M.device[m]); }},
  {head: 'topology', key: function (m) { return M.topology[m]; }, cell: function (m) { return esc(M.topology[m]); }},
  {head: 'copies', num: 1, key: function (m) { return M.copies[m]; }, cell: function (m) { return g(M.copies[m], 6); }},
  {head: 'input current', num: 1, key: function (m) { return M.input[m]; }, cell: function (m) { return si(M.input[m], 'A', 4); }},
  {head: 'input voltage', num: 1, key: function (m) { return M.vin[m]; }, cell: function (m) { return si(M.vin[m], 'V', 4); }},
  {head: 'fan-out', num: 1, key: function (m) { return M.fanout[m]; }, cell: function (m) { return g(M.fanout[m], 4); }},
  {head: 'loads below', num: 1, key: function (m) { return below[m]; }, cell: function (m) { return below[m]; }},
  {head: 'failing below', num: 1, key: function (m) { return failBelow[m]; }, cell: function (m) { return failBelow[m] ? '<span class="fail">' + failBelow[m] + '</span>' : '0'; }}
];
var mirrors = new Table($('mirror-table'), mirrorCols, null, 25);

function refresh() {
  var rows = loadRows();
  loads.set(rows);
  mirrors.set(mirrorRows());
  $('count').textContent = 'showing ' + rows.length + ' of ' + nL + ' loads';
  $('subtree').innerHTML = state.sub >= 0 ? '<span class="chip">below ' + esc(M.name[state.sub]) +
    ' <a class="link" data-sub="-1" title="show every load">\u2715</a></span>' : '';
}

// --- explanations, built on demand ----------------------------------------
function explain(i) {
  var e = D.explain[String(i)], box = $('why');
  if (!e) return;
  var h = ['<h3>Why <span class="fail">' + esc(L.name[i]) + '</span> fails</h3>',
           '<p class="hint">' + path(i).map(esc).join(' \u203a ') + '</p><ul>'];
  e.reasons.forEach(function (r) { h.push('<li>' + esc(r) + '</li>'); });
  e.hints.forEach(function (r) { h.push('<li><b>hint:</b> ' + esc(r) + '</li>'); });
  h.push('</ul><p>Error terms ' + esc(e.where) + ', largest first (they compound: \u03a0(1 + term) \u2212 1 = the load\u2019s error):</p>');
  var big = 0; e.terms.forEach(function (t) { big = Math.max(big, Math.abs(t[2])); });
  h.push('<table class="terms"><tbody>');
  e.terms.forEach(function (t) {
    var w = big ? Math.max(1, Math.round(Math.abs(t[2]) / big * 240)) : 1;
    h.push('<tr><td>' + esc(typeof t[0] === 'string' ? t[0] : M.name[t[0]]) + '</td><td>' + esc(t[1]) + '</td><td class="num">' + pct(t[2]) +
           '</td><td><span class="bar ' + (t[2] >= 0 ? 'up' : 'down') + '" style="width:' + w + 'px"></span></td></tr>');
  });
  h.push('</tbody></table><p class="hint">solid bar: raises the current \u00b7 striped: lowers it</p><p>' + esc(e.budget) + '</p>');
  box.innerHTML = h.join('');
  box.hidden = false;
  box.dataset.load = L.name[i];
  box.scrollIntoView({block: 'start'});
}

// --- tree outline --------------------------------------------------------
var open = new Uint8Array(nM), level = 1, CAP = 200;
open[0] = 1;
function node(m) {
  var kids = kidsM[m], has = kids.length || kidsL[m].length;
  var h = '<li><button class="tog" data-toggle="' + m + '" aria-label="expand">' + (has ? (open[m] ? '\u25be' : '\u25b8') : '\u00b7') +
    '</button><a class="link" data-sub="' + m + '">' + esc(M.name[m]) + '</a><span class="info">' + esc(M.device[m] + ', ' + M.topology[m]) +
    ', in ' + si(M.input[m], 'A', 4) + ' \u00b7 ' + below[m] + ' loads' + (failBelow[m] ? ', <span class="fail">' + failBelow[m] + ' FAIL</span>' : '') + '</span>';
  if (open[m]) {
    h += '<ul>';
    kids.slice(0, CAP).forEach(function (c) { h += node(c); });
    if (kids.length > CAP) h += '<li class="hint">\u2026 ' + (kids.length - CAP) + ' more mirrors (see the mirror table)</li>';
    var own = kidsL[m];
    if (own.length) {
      var fails = own.filter(function (i) { return !L.pass[i]; }).length;
      if (own.length <= 12) {
        h += '<li>' + own.map(function (i) { return L.pass[i] ? '<span class="pass">' + esc(L.name[i]) + '</span>' :
          '<a class="fail" href="#why" data-why="' + i + '">' + esc(L.name[i]) + '</a>'; }).join(', ') + '</li>';
      } else {
        h += '<li><a class="link" data-sub="' + m + '">' + own.length + ' loads here</a>' + (fails ? ', <span class="fail">' + fails + ' FAIL</span>' : '') + '</li>';
      }
    }
    h += '</ul>';
  }
  return h + '</li>';
}
function outline() { $('outline').innerHTML = nM ? '<ul>' + node(0) + '</ul>' : ''; }

// --- zoomable diagram ------------------------------------------------------
function diagram() {
  var box = $('diagram');
  if (!box) return;
  var svg = box.querySelector('svg');
  if (!svg) return;
  var vb0 = svg.getAttribute('viewBox');
  if (!vb0) return;
  var base = vb0.split(/[ ,]+/).map(Number), vb = base.slice();
  svg.removeAttribute('width'); svg.removeAttribute('height');
  svg.setAttribute('preserveAspectRatio', 'xMidYMin meet');
  // the box is as tall as the fitted drawing needs (at most 75 % of the window): no blank band
  function size() {
    if (!box.clientWidth) return;  // folded away: sized when opened
    var h = box.clientWidth * base[3] / base[2];
    box.style.height = Math.max(120, Math.min(0.75 * window.innerHeight, h + 2)) + 'px';
  }
  size(); window.addEventListener('resize', size);
  var fold = box.closest('details');
  if (fold) fold.addEventListener('toggle', size);
  function apply() { svg.setAttribute('viewBox', vb.join(' ')); }
  box.addEventListener('wheel', function (e) {
    e.preventDefault();
    var r = box.getBoundingClientRect(), f = e.deltaY > 0 ? 1.2 : 1 / 1.2;
    var fx = (e.clientX - r.left) / r.width, fy = (e.clientY - r.top) / r.height;
    var w = vb[2] * f, h = vb[3] * f;
    vb = [vb[0] + (vb[2] - w) * fx, vb[1] + (vb[3] - h) * fy, w, h]; apply();
  }, {passive: false});
  var drag = null;
  box.addEventListener('mousedown', function (e) { drag = [e.clientX, e.clientY, vb[0], vb[1]]; box.style.cursor = 'grabbing'; });
  window.addEventListener('mouseup', function () { drag = null; box.style.cursor = ''; });
  window.addEventListener('mousemove', function (e) {
    if (!drag) return;
    var r = box.getBoundingClientRect(), s = Math.max(vb[2] / r.width, vb[3] / r.height);
    vb[0] = drag[2] - (e.clientX - drag[0]) * s; vb[1] = drag[3] - (e.clientY - drag[1]) * s; apply();
  });
  box.addEventListener('dblclick', function () { vb = base.slice(); apply(); });
}

// --- wiring ----------------------------------------------------------------
document.addEventListener('click', function (e) {
  var t = e.target.closest('[data-why],[data-sub],[data-toggle]');
  if (!t) return;
  if (t.dataset.why !== undefined) { e.preventDefault(); explain(Number(t.dataset.why)); }
  else if (t.dataset.sub !== undefined) { state.sub = Number(t.dataset.sub); refresh(); if (state.sub >= 0) $('loads').scrollIntoView({block: 'start'}); }
  else if (t.dataset.toggle !== undefined) { var m = Number(t.dataset.toggle); open[m] = open[m] ? 0 : 1; outline(); }
});
$('search').addEventListener('input', function (e) { state.q = e.target.value.trim(); refresh(); });
$('verdict').addEventListener('change', function (e) { state.verdict = e.target.value; refresh(); });
var cond = $('condition');
if (L.cond_at) {
  var seen = {};
  L.cond_at.forEach(function (k) { seen[k] = (seen[k] || 0) + 1; });
  D.conditions.forEach(function (name, k) { if (seen[k]) cond.insertAdjacentHTML('beforeend', '<option value="' + k + '">worst at ' + esc(name) + ' (' + seen[k] + ')</option>'); });
  cond.addEventListener('change', function (e) { state.cond = e.target.value; refresh(); });
} else cond.hidden = true;
$('expand').addEventListener('click', function () { level += 1; for (var m = 0; m < nM; m++) if (M.depth[m] < level) open[m] = 1; outline(); });
$('collapse').addEventListener('click', function () { level = 1; open = new Uint8Array(nM); open[0] = 1; outline(); });
refresh(); outline(); diagram();
var hash = decodeURIComponent(location.hash.slice(1));
if (hash.indexOf('load=') === 0) { var k = L.name.indexOf(hash.slice(5)); if (k >= 0 && !L.pass[k]) explain(k); }
document.body.dataset.ready = '1';
})();
"""
