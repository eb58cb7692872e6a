/* pairmap's offline map page: search, highlight, partner panel, clusters, filters, zoom and
 * pan, state in the URL fragment. Hand-written, no library; every text from the data goes
 * into the page through textContent or setAttribute, never as markup. */
(function () {
  'use strict';
  var D = JSON.parse(document.getElementById('pm-data').textContent);
  var I = D.items, E = D.edges, C = D.clusters;
  var R = JSON.parse(document.getElementById('pm-run').textContent).run;
  var n = I.name.length, m = E.a.length;
  var UNIT = R.unit || 'respondents';
  var svg = document.querySelector('#pm-view > svg');

  /* ---- small helpers ------------------------------------------------------------------- */
  function $(id) { return document.getElementById(id); }
  function el(tag, attrs, text) {
    var e = document.createElement(tag);
    if (attrs) { for (var k in attrs) { e.setAttribute(k, attrs[k]); } }
    if (text !== undefined && text !== null) { e.textContent = text; }
    return e;
  }
  function bdi(text) { return el('bdi', null, text); }
  function thousands(x) {
    var s = String(Math.round(x)), out = '';
    while (s.length > 3) { out = ',' + s.slice(-3) + out; s = s.slice(0, -3); }
    return s + out;
  }
  function pct(x) { return (100 * x).toFixed(1) + '%'; }
  function fixed(x, d) { return x === null ? 'n/a' : x.toFixed(d); }
  /* q-values in the one style of the command line's text (pm_cli_q: C's %.2g): two
   * significant digits, no trailing zeros, an exponent of two digits or more below 1e-4 */
  function qtext(q) {
    if (q === null) { return 'n/a'; }
    if (q === 0) { return '0'; }
    var m = q.toExponential(1).split('e'), x = parseInt(m[1], 10);
    if (x >= -4 && x < 2) { return String(Number(q.toPrecision(2))); }
    var d = m[0].replace(/\.0$/, ''), a = Math.abs(x);
    return d + 'e' + (x < 0 ? '-' : '+') + (a < 10 ? '0' : '') + a;
  }
  function count(x) { return Number.isInteger(x) ? thousands(x) : x.toFixed(1); }
  /* ---- the data --------------------------------------------------------------------------- */
  /* letter case folded as --item folds it (src/itemfind.c): ASCII and Latin-1 letters */
  function fold(t) {
    return t.replace(/[A-Z\u00C0-\u00D6\u00D8-\u00DE]/g, function (c) {
      return String.fromCharCode(c.charCodeAt(0) + 32); });
  }
  var folded = I.name.map(fold);
  /* the SVG names items by their names cleaned for XML; svg_name lists those that differ */
  var svgName = I.name.slice();
  (I.svg_name || []).forEach(function (x) { svgName[x[0]] = x[1]; });
  function svgKey(i) { return svgName[i]; }
  var byKey = new Map();
  svgName.forEach(function (s, i) { if (!byKey.has(s)) { byKey.set(s, i); } });
  if (!E.expected) {
    /* unweighted: the same double operations as src/assoc.c, in its order (IEEE 754 rounds
     * each the same way), from the integer counts */
    E.expected = []; E.lift = []; E.confidence_ab = []; E.confidence_ba = [];
    for (var e = 0; e < m; e++) {
      var da = I.respondents[E.a[e]], db = I.respondents[E.b[e]], dab = E.together[e];
      E.expected.push(da * db / R.respondents);
      E.lift.push(R.respondents * dab / (da * db));
      E.confidence_ab.push(dab / da);
      E.confidence_ba.push(dab / db);
    }
  }
  var adj = [];
  for (var i = 0; i < n; i++) { adj.push([]); }
  var hasNeg = false, maxPhi = 0, minQ = Infinity;
  for (var k = 0; k < m; k++) {
    adj[E.a[k]].push(k);
    adj[E.b[k]].push(k);
    if (E.phi[k] < 0) { hasNeg = true; }
    if (Math.abs(E.phi[k]) > maxPhi) { maxPhi = Math.abs(E.phi[k]); }
    if (E.q_value[k] !== null && E.q_value[k] > 0 && E.q_value[k] < minQ) { minQ = E.q_value[k]; }
  }
  var members = C.map(function () { return []; });
  for (i = 0; i < n; i++) { members[I.cluster[i] - 1].push(i); }
  members.forEach(function (list) {
    list.sort(function (x, y) { return I.share[y] - I.share[x] || x - y; }); /* as nodes.csv */
  });

  /* ---- the picture's marks ------------------------------------------------------------- */
  var nodeEl = new Array(n), labelEl = new Array(n), edgeEl = new Array(m), drawnCount = 0;
  var labels = [];
  if (svg) {
    svg.querySelectorAll('.node[data-item]').forEach(function (e) {
      var v = byKey.get(e.getAttribute('data-item'));
      if (v !== undefined) { nodeEl[v] = e; drawnCount++; }
    });
    svg.querySelectorAll('.label[data-item]').forEach(function (e) {
      var v = byKey.get(e.getAttribute('data-item'));
      if (v !== undefined) { labelEl[v] = e; }
    });
    var ekey = new Map();
    for (k = 0; k < m; k++) {
      ekey.set(svgKey(E.a[k]) + '\u0000' + svgKey(E.b[k]), k);
      ekey.set(svgKey(E.b[k]) + '\u0000' + svgKey(E.a[k]), k);
    }
    svg.querySelectorAll('.edge[data-a]').forEach(function (e) {
      var kk = ekey.get(e.getAttribute('data-a') + '\u0000' + e.getAttribute('data-b'));
      if (kk !== undefined) { edgeEl[kk] = e; }
    });
    svg.querySelectorAll('text').forEach(function (e) {
      var fs = parseFloat(e.getAttribute('font-size'));
      var c = e.getAttribute('class') || '';
      if (fs > 0 && /\b(label|halo|cluster-label)\b/.test(c)) { labels.push([e, fs]); }
    });
  }
  function clusterColor(c) {
    var list = members[c - 1];
    for (var j = 0; j < list.length; j++) {
      if (nodeEl[list[j]]) { return nodeEl[list[j]].getAttribute('fill') || '#999'; }
    }
    return '#999';
  }

  /* ---- state and the URL fragment ------------------------------------------------------ */
  var S = { item: -1, cluster: 0, phi: 0, q: null, neg: true, missing: null, seg: null };
  var SEG = D.segments || []; /* [{column, levels, index: [level][vertex]}] */
  function parseHash() {
    var out = {};
    location.hash.replace(/^#/, '').split('&').forEach(function (part) {
      if (!part) { return; }
      var eq = part.indexOf('=');
      var key = eq < 0 ? part : part.slice(0, eq), val = eq < 0 ? '' : part.slice(eq + 1);
      try { out[decodeURIComponent(key)] = decodeURIComponent(val); } catch (err) { /* skip */ }
    });
    return out;
  }
  function readHash() {
    var h = parseHash();
    S.item = -1; S.cluster = 0; S.missing = null;
    if (h.item !== undefined && h.item !== '') {
      var found = resolve(h.item);
      if (found >= 0) { S.item = found; } else { S.missing = h.item; }
    } else if (h.cluster !== undefined) {
      if (h.cluster === 'alone') { S.cluster = 'alone'; } else {
        var c = parseInt(h.cluster, 10);
        if (c >= 1 && c <= C.length) { S.cluster = c; }
      }
    }
    var phi = parseFloat(h.phi);
    S.phi = isFinite(phi) && phi > 0 ? phi : 0;
    var q = parseFloat(h.q);
    S.q = isFinite(q) && q >= 0 ? q : null;
    S.neg = h.neg !== '0';
    S.seg = null;
    SEG.forEach(function (col, c) {
      if (col.column !== h.column) { return; }
      var l = col.levels.indexOf(h.segment);
      if (l >= 0) { S.seg = [c, l]; }
    });
  }
  var writing = false;
  function writeHash() {
    var parts = [];
    if (S.item >= 0) { parts.push('item=' + encodeURIComponent(I.name[S.item])); }
    else if (S.cluster) { parts.push('cluster=' + S.cluster); }
    if (S.phi > 0) { parts.push('phi=' + S.phi); }
    if (S.q !== null) { parts.push('q=' + S.q); }
    if (hasNeg && !S.neg) { parts.push('neg=0'); }
    if (S.seg) {
      parts.push('column=' + encodeURIComponent(SEG[S.seg[0]].column));
      parts.push('segment=' + encodeURIComponent(SEG[S.seg[0]].levels[S.seg[1]]));
    }
    var h = parts.length ? '#' + parts.join('&') : '';
    if (h === location.hash || (h === '' && location.hash === '')) { return; }
    try { history.replaceState(null, '', h || location.pathname + location.search); }
    catch (err) { writing = true; location.hash = h; }
  }
  window.addEventListener('hashchange', function () {
    if (writing) { writing = false; return; }
    readHash(); syncControls(); render();
  });

  /* ---- finding an item as you type: names equal ignoring letter case, then those that
   * start with the text, then those that contain it (each group in byte order), then the
   * closest by edit distance: the order of --item's suggestions (src/itemfind.c) ---------- */
  function edit(a, b, cap) {
    if (Math.abs(a.length - b.length) > cap) { return cap + 1; }
    var prev = [], cur = [];
    for (var j = 0; j <= b.length; j++) { prev.push(j); }
    for (var x = 1; x <= a.length; x++) {
      cur = [x];
      var best = x;
      for (j = 1; j <= b.length; j++) {
        var v = Math.min(prev[j - 1] + (a[x - 1] === b[j - 1] ? 0 : 1), prev[j] + 1, cur[j - 1] + 1);
        cur.push(v);
        if (v < best) { best = v; }
      }
      if (best > cap) { return cap + 1; }
      prev = cur;
    }
    return prev[b.length];
  }
  function matches(text, limit) {
    var f = fold(text.trim()), out = [];
    if (!f) { return out; }
    var equal = [], pre = [], sub = [];
    for (var j = 0; j < n; j++) {
      var p = folded[j].indexOf(f);
      if (p < 0) { continue; }
      if (folded[j].length === f.length) { equal.push(j); }
      else if (p === 0) { pre.push(j); } else { sub.push(j); }
    }
    equal.forEach(function (j) { out.push([j, '']); });
    pre.forEach(function (j) { out.push([j, '']); });
    sub.forEach(function (j) { out.push([j, '']); });
    if (out.length < 3) {
      var cap = Math.max(1, Math.floor(f.length / 3)), near = [];
      for (j = 0; j < n; j++) {
        if (folded[j].indexOf(f) >= 0) { continue; }
        var d = edit(f, folded[j], cap);
        if (d <= cap) { near.push([d, j]); }
      }
      near.sort(function (x, y) { return x[0] - y[0] || x[1] - y[1]; });
      near.slice(0, 5).forEach(function (x) { out.push([x[1], 'closest']); });
    }
    return out.slice(0, limit);
  }
  /* a name in the fragment, by the rules of --item: the exact name, else the one name equal
   * to it ignoring letter case, else the one wide-survey item "NAME (question)"; anything
   * else is not taken (the panel then lists the closest names) */
  function resolve(name) {
    var j = I.name.indexOf(name);
    if (j >= 0) { return j; }
    var f = fold(name.trim()), hit = -1, hits = 0;
    for (j = 0; j < n; j++) { if (folded[j] === f) { hit = j; hits++; } }
    if (hits === 1) { return hit; }
    if (hits > 1) { return -1; }
    for (j = 0; j < n; j++) {
      if (folded[j].length > f.length + 3 && folded[j].indexOf(f + ' (') === 0 &&
          folded[j][folded[j].length - 1] === ')') { hit = j; hits++; }
    }
    return hits === 1 ? hit : -1;
  }

  /* ---- filters and partners ------------------------------------------------------------ */
  function shown(k) {
    var phi = E.phi[k], q = E.q_value[k];
    if (S.phi > 0 && !(Math.abs(phi) >= S.phi)) { return false; }
    if (S.q !== null && !(q <= S.q)) { return false; }
    return !(phi < 0 && !S.neg);
  }
  /* the ranking of `pairmap partners` (--by phi): positive pairs largest phi first, negative
   * smallest first, both by |phi|; ties by the partner's name in byte order, which is the
   * items' order here */
  function rankKey(phi) {
    var v = R.sign === 'both' ? Math.abs(phi) : phi;
    if (R.sign === 'negative') { v = -v; }
    return isFinite(v) ? v : (v > 0 ? Infinity : -Infinity);
  }
  function partners(v) {
    var rows = [];
    adj[v].forEach(function (kk) {
      if (!shown(kk)) { return; }
      var fwd = E.a[kk] === v;
      rows.push({ k: kk, j: fwd ? E.b[kk] : E.a[kk], fwd: fwd, key: rankKey(E.phi[kk]) });
    });
    rows.sort(function (x, y) { return x.key !== y.key ? (x.key > y.key ? -1 : 1) : x.j - y.j; });
    return rows;
  }

  /* ---- drawing the state --------------------------------------------------------------- */
  function mark(list, cls, on) {
    list.forEach(function (e) { if (e) { e.classList.toggle(cls, on); } });
  }
  function render() {
    var hl = new Set(), hlEdges = new Set(), focus = false;
    for (var kk = 0; kk < m; kk++) {
      if (edgeEl[kk]) { edgeEl[kk].classList.toggle('pm-off', !shown(kk)); }
    }
    if (S.item >= 0) {
      focus = true;
      hl.add(S.item);
      partners(S.item).forEach(function (r) { hl.add(r.j); hlEdges.add(r.k); });
    } else if (S.cluster) {
      focus = true;
      clusterItems(S.cluster).forEach(function (v) { hl.add(v); });
      for (kk = 0; kk < m; kk++) {
        if (shown(kk) && hl.has(E.a[kk]) && hl.has(E.b[kk])) { hlEdges.add(kk); }
      }
    }
    applyMarks(focus, hl, hlEdges);
    tint();
    renderPanel();
    renderClusterButtons();
    writeHash();
  }
  function applyMarks(focus, hl, hlEdges) {
    if (svg) { svg.classList.toggle('pm-focus', focus); }
    for (var v = 0; v < n; v++) {
      var on = hl.has(v);
      if (nodeEl[v]) {
        nodeEl[v].classList.toggle('pm-hl', on);
        nodeEl[v].classList.toggle('pm-sel', v === S.item);
      }
      if (labelEl[v]) { labelEl[v].classList.toggle('pm-hl', on); }
    }
    for (var kk = 0; kk < m; kk++) {
      if (edgeEl[kk]) { edgeEl[kk].classList.toggle('pm-hl', hlEdges.has(kk)); }
    }
  }
  function clusterItems(c) {
    if (c === 'alone') {
      var out = [];
      members.forEach(function (list) { if (list.length === 1) { out.push(list[0]); } });
      return out.sort(function (x, y) { return I.share[y] - I.share[x] || x - y; });
    }
    return members[c - 1] || [];
  }
  var preview = null; /* a cluster shown while the pointer or focus is on its button */
  function previewCluster(c) {
    if (c === null) { preview = null; render(); return; }
    preview = c;
    var hl = new Set(clusterItems(c)), hlEdges = new Set();
    for (var kk = 0; kk < m; kk++) {
      if (shown(kk) && hl.has(E.a[kk]) && hl.has(E.b[kk])) { hlEdges.add(kk); }
    }
    applyMarks(true, hl, hlEdges);
  }

  /* ---- segments: items tinted by their shrunk index in the chosen segment ------------ */
  var baseFill = nodeEl.map(function (e) { return e ? e.getAttribute('fill') : null; });
  function mix(a, b, t) {
    var out = '#';
    for (var j = 1; j < 7; j += 2) {
      var x = Math.round(parseInt(a.substr(j, 2), 16) * (1 - t) + parseInt(b.substr(j, 2), 16) * t);
      out += (x < 16 ? '0' : '') + x.toString(16);
    }
    return out;
  }
  /* below 1 (chosen less there than overall) towards blue, above towards orange; the
   * segment's strongest index (shrinkage keeps most near 1), at least 1.1, is the full
   * colour */
  function indexColor(x, span) {
    if (x === null || !(x > 0)) { return '#ffffff'; }
    var t = Math.max(-1, Math.min(1, Math.log(x) / span));
    return t < 0 ? mix('#e6e6e6', '#2f6db5', -t) : mix('#e6e6e6', '#c8571e', t);
  }
  function tint() {
    var span = Math.log(1.1);
    if (S.seg) {
      SEG[S.seg[0]].index[S.seg[1]].forEach(function (x) {
        if (x > 0) { span = Math.max(span, Math.abs(Math.log(x))); }
      });
      $('pm-seg-key').textContent = 'blue: chosen less there than overall, orange: more; ' +
        'full colour at \u00d7' + Math.exp(span).toFixed(2) + ' either way';
    }
    for (var v = 0; v < n; v++) {
      if (!nodeEl[v]) { continue; }
      if (S.seg) {
        var x = SEG[S.seg[0]].index[S.seg[1]][v];
        nodeEl[v].setAttribute('fill', indexColor(x, span));
        nodeEl[v].setAttribute('data-index', x === null ? '' : String(x));
      } else {
        nodeEl[v].setAttribute('fill', baseFill[v]);
        nodeEl[v].removeAttribute('data-index');
      }
    }
    $('pm-seg-key').hidden = !S.seg;
  }
  if (SEG.length) {
    var segSel = $('pm-seg');
    segSel.appendChild(el('option', { value: '' }, 'none (cluster colours)'));
    SEG.forEach(function (col, c) {
      col.levels.forEach(function (lv, l) {
        segSel.appendChild(el('option', { value: c + ':' + l }, col.column + ' \u00b7 ' + lv));
      });
    });
    segSel.addEventListener('change', function () {
      var x = segSel.value.split(':');
      S.seg = segSel.value ? [parseInt(x[0], 10), parseInt(x[1], 10)] : null;
      render();
    });
    $('pm-seg-box').hidden = false;
  }

  /* ---- the side panel ------------------------------------------------------------------ */
  function chooseButton(v) {
    var b = el('button', { type: 'button', 'class': 'pm-link', 'data-item': I.name[v] });
    b.appendChild(bdi(I.name[v]));
    b.addEventListener('click', function () { choose(v); });
    return b;
  }
  function cell(tr, cls, value, text) {
    var td = el('td', { 'data-col': cls }, text);
    if (value !== null && value !== undefined) { td.setAttribute('data-v', String(value)); }
    tr.appendChild(td);
    return td;
  }
  function renderPanel() {
    var p = $('pm-panel');
    p.textContent = '';
    if (S.missing !== null) {
      p.appendChild(el('h2', null, 'No item named'));
      p.lastChild.appendChild(document.createTextNode(' \u201c'));
      p.lastChild.appendChild(bdi(S.missing));
      p.lastChild.appendChild(document.createTextNode('\u201d'));
      var near = matches(S.missing, 5);
      if (near.length) {
        var para = el('p', null, 'Closest: ');
        near.forEach(function (x, j) {
          if (j) { para.appendChild(document.createTextNode(', ')); }
          para.appendChild(chooseButton(x[0]));
        });
        p.appendChild(para);
      }
      return;
    }
    if (S.item >= 0) { itemPanel(p, S.item); } else if (S.cluster) { clusterPanel(p, S.cluster); }
  }
  function itemPanel(p, v) {
    var h = el('h2', { id: 'pm-item' });
    h.appendChild(bdi(I.name[v]));
    p.appendChild(h);
    if (I.category[v] !== null) { p.appendChild(el('p', { 'class': 'pm-note' }, I.category[v])); }
    var share = el('p', { id: 'pm-share', 'data-v': String(I.share[v]),
      'data-low': String(I.share_low[v]), 'data-high': String(I.share_high[v]) });
    share.textContent = (R.weighted ? pct(I.share[v]) + ' of the weight (' +
      thousands(I.respondents[v]) + ' ' + UNIT + ')' : thousands(I.respondents[v]) + ' of ' +
      thousands(R.respondents) + ' ' + UNIT + ', ' + pct(I.share[v])) +
      '; 95% Jeffreys interval ' + pct(I.share_low[v]) + ' to ' + pct(I.share_high[v]);
    p.appendChild(share);
    var c = I.cluster[v], cp = el('p', null, C[c - 1].size > 1 ? 'Cluster ' + c + ': ' :
      'On its own (no positive kept pair): ');
    var cb = el('button', { type: 'button', 'class': 'pm-link' });
    var target = C[c - 1].size > 1 ? c : 'alone';
    cb.appendChild(bdi(C[c - 1].size > 1 ? C[c - 1].name || 'Cluster ' + c : 'the items on their own'));
    cb.addEventListener('click', function () { S.item = -1; S.cluster = target; render(); });
    cp.appendChild(cb);
    p.appendChild(cp);
    if (S.seg) {
      var x = SEG[S.seg[0]].index[S.seg[1]][v];
      var sp = el('p', { id: 'pm-seg-index', 'data-v': x === null ? '' : String(x) });
      sp.appendChild(document.createTextNode('Index in ' + SEG[S.seg[0]].column + ' \u00b7 '));
      sp.appendChild(bdi(SEG[S.seg[0]].levels[S.seg[1]]));
      sp.appendChild(document.createTextNode(': ' + (x === null ? 'n/a' : x.toFixed(2)) +
        ' (shrunk share there / share overall)'));
      p.appendChild(sp);
    }
    if (!nodeEl[v]) {
      p.appendChild(el('p', { 'class': 'pm-note' }, 'Not drawn in the picture (' + drawnCount +
        ' of ' + n + ' items are); its numbers are all here.'));
    }
    var rows = partners(v), hidden = adj[v].length - rows.length;
    var t = el('table', { id: 'pm-partners' });
    var cap = el('caption', null, rows.length ? 'Kept partners, ranked by phi' : 'No kept partner');
    if (hidden) { cap.textContent += ' (' + hidden + ' hidden by the filters)'; }
    t.appendChild(cap);
    var head = el('tr');
    [['partner', 'the other item'], ['together', UNIT + ' who chose both'],
     ['expected', 'what chance alone would give'],
     ['confidence', 'share of this item\'s ' + UNIT + ' who also chose the partner, with its 95% Jeffreys interval'],
     ['back', 'confidence the other way: share of the partner\'s ' + UNIT + ' who also chose this item'],
     ['lift', 'together / expected'], ['phi', 'phi coefficient'],
     ['q', 'Benjamini-Hochberg q-value']].forEach(function (x) {
      head.appendChild(el('th', { scope: 'col', title: x[1] }, x[0]));
    });
    var thead = el('thead');
    thead.appendChild(head);
    if (rows.length) { t.appendChild(thead); }
    var body = el('tbody');
    rows.forEach(function (r) {
      var kk = r.k, tr = el('tr', { 'data-item': I.name[r.j] });
      var th = el('th', { scope: 'row' });
      th.appendChild(chooseButton(r.j));
      tr.appendChild(th);
      var ab = r.fwd ? 'ab' : 'ba', ba = r.fwd ? 'ba' : 'ab';
      cell(tr, 'together', E.together[kk], count(E.together[kk]));
      cell(tr, 'expected', E.expected[kk], fixed(E.expected[kk], 1));
      var cf = cell(tr, 'confidence', E['confidence_' + ab][kk], pct(E['confidence_' + ab][kk]));
      cf.setAttribute('data-low', String(E['confidence_' + ab + '_low'][kk]));
      cf.setAttribute('data-high', String(E['confidence_' + ab + '_high'][kk]));
      cf.appendChild(el('span', { 'class': 'pm-ci', title: '95% Jeffreys interval' },
        pct(E['confidence_' + ab + '_low'][kk]) + '\u2013' + pct(E['confidence_' + ab + '_high'][kk])));
      cell(tr, 'confidence_back', E['confidence_' + ba][kk], pct(E['confidence_' + ba][kk]));
      cell(tr, 'lift', E.lift[kk], fixed(E.lift[kk], 2));
      cell(tr, 'phi', E.phi[kk], fixed(E.phi[kk], 3));
      cell(tr, 'q_value', E.q_value[kk], qtext(E.q_value[kk]));
      tr.addEventListener('mouseenter', function () { flash(r.j, true); });
      tr.addEventListener('mouseleave', function () { flash(r.j, false); });
      body.appendChild(tr);
    });
    t.appendChild(body);
    p.appendChild(t);
  }
  function flash(v, on) { if (nodeEl[v]) { nodeEl[v].classList.toggle('pm-sel', on || v === S.item); } }
  function clusterPanel(p, c) {
    var list = clusterItems(c);
    var h = el('h2', { id: 'pm-cluster' }, c === 'alone' ? 'Items on their own' : 'Cluster ' + c);
    p.appendChild(h);
    if (c !== 'alone') {
      var nm = el('p');
      nm.appendChild(bdi(C[c - 1].name || ''));
      p.appendChild(nm);
    }
    p.appendChild(el('p', { 'class': 'pm-note' }, list.length + ' items' +
      (c === 'alone' ? ' without a positive kept pair' : '') + '; share of ' + UNIT + ':'));
    var t = el('table', { id: 'pm-members' }), thead = el('thead'), head = el('tr');
    ['item', 'share', 'kept pairs'].forEach(function (x) { head.appendChild(el('th', { scope: 'col' }, x)); });
    thead.appendChild(head);
    t.appendChild(thead);
    var body = el('tbody'), LIMIT = 300;
    list.slice(0, LIMIT).forEach(function (v) {
      var tr = el('tr', { 'data-item': I.name[v] }), th = el('th', { scope: 'row' });
      th.appendChild(chooseButton(v));
      tr.appendChild(th);
      cell(tr, 'share', I.share[v], pct(I.share[v]));
      cell(tr, 'degree', I.degree[v], String(I.degree[v]));
      body.appendChild(tr);
    });
    t.appendChild(body);
    p.appendChild(t);
    if (list.length > LIMIT) {
      p.appendChild(el('p', { 'class': 'pm-note' }, 'and ' + thousands(list.length - LIMIT) +
        ' more with smaller shares (the search finds every item)'));
    }
  }

  /* ---- the cluster list ------------------------------------------------------------------ */
  var clusterButtons = [];
  function buildClusters() {
    var ul = $('pm-cluster-list'), alone = 0;
    C.forEach(function (cl, j) {
      if (cl.size < 2) { alone++; return; }
      addClusterButton(ul, j + 1, cl.name || 'Cluster ' + (j + 1), cl.size, clusterColor(j + 1));
    });
    if (alone) { addClusterButton(ul, 'alone', 'items on their own', alone, '#a3a3a3'); }
    $('pm-clusters').appendChild(el('p', { 'class': 'pm-note' }, 'Circle area: share of ' + UNIT +
      '. Line width: ' + R.measure + '. Clusters by Louvain; names are their leading members.'));
  }
  function addClusterButton(ul, c, name, size, color) {
    var li = el('li'), b = el('button', { type: 'button', 'data-cluster': String(c),
      'aria-pressed': 'false', 'aria-label': (c === 'alone' ? '' : 'Cluster ' + c + ': ') + name +
      ', ' + size + ' items' });
    var sw = el('span', { 'class': 'pm-swatch', 'aria-hidden': 'true' });
    sw.style.background = color;
    b.appendChild(sw);
    var label = el('span');
    label.appendChild(bdi(name));
    b.appendChild(label);
    b.appendChild(el('span', { 'class': 'pm-size' }, String(size)));
    b.addEventListener('click', function () {
      S.item = -1; S.missing = null;
      S.cluster = S.cluster === c ? 0 : c;
      preview = null;
      render();
    });
    b.addEventListener('mouseenter', function () { previewCluster(c); });
    b.addEventListener('focus', function () { previewCluster(c); });
    b.addEventListener('mouseleave', function () { if (preview === c) { previewCluster(null); } });
    b.addEventListener('blur', function () { if (preview === c) { previewCluster(null); } });
    li.appendChild(b);
    ul.appendChild(li);
    clusterButtons.push([b, c]);
  }
  function renderClusterButtons() {
    clusterButtons.forEach(function (x) {
      x[0].setAttribute('aria-pressed', S.item < 0 && S.cluster === x[1] ? 'true' : 'false');
    });
  }

  /* ---- search with suggestions ----------------------------------------------------------- */
  var input = $('pm-search'), sug = $('pm-suggest'), active = -1, current = [];
  function choose(v) {
    S.item = v; S.cluster = 0; S.missing = null;
    input.value = I.name[v];
    closeSuggest();
    render();
  }
  function closeSuggest() {
    sug.hidden = true; sug.textContent = ''; active = -1; current = [];
    input.setAttribute('aria-expanded', 'false');
    input.removeAttribute('aria-activedescendant');
  }
  function showSuggest() {
    current = matches(input.value, 12);
    sug.textContent = '';
    active = -1;
    input.removeAttribute('aria-activedescendant');
    if (!current.length) { closeSuggest(); return; }
    current.forEach(function (x, j) {
      var li = el('li', { role: 'option', id: 'pm-opt-' + j, 'aria-selected': 'false',
        'data-item': I.name[x[0]] });
      li.appendChild(bdi(I.name[x[0]]));
      if (x[1]) { li.appendChild(el('span', { 'class': 'pm-how' }, x[1])); }
      li.addEventListener('mousedown', function (ev) { ev.preventDefault(); choose(x[0]); });
      sug.appendChild(li);
    });
    sug.hidden = false;
    input.setAttribute('aria-expanded', 'true');
  }
  function moveActive(d) {
    if (!current.length) { showSuggest(); return; }
    active = (active + d + current.length) % current.length;
    Array.prototype.forEach.call(sug.children, function (li, j) {
      li.setAttribute('aria-selected', j === active ? 'true' : 'false');
    });
    input.setAttribute('aria-activedescendant', 'pm-opt-' + active);
    sug.children[active].scrollIntoView({ block: 'nearest' });
  }
  input.addEventListener('input', showSuggest);
  input.addEventListener('blur', function () { setTimeout(closeSuggest, 100); });
  input.addEventListener('keydown', function (ev) {
    if (ev.key === 'ArrowDown') { moveActive(1); ev.preventDefault(); }
    else if (ev.key === 'ArrowUp') { moveActive(-1); ev.preventDefault(); }
    else if (ev.key === 'Escape') { closeSuggest(); }
    else if (ev.key === 'Enter') {
      var list = current.length ? current : matches(input.value, 1);
      if (list.length) { choose(list[active >= 0 ? active : 0][0]); }
      else if (input.value.trim()) { S.item = -1; S.cluster = 0; S.missing = input.value.trim(); render(); }
      ev.preventDefault();
    }
  });

  /* ---- filters ----------------------------------------------------------------------------- */
  var phiIn = $('pm-phi'), qIn = $('pm-q');
  var phiMax = Math.max(0.01, Math.ceil(maxPhi * 100) / 100);
  var qLo = isFinite(minQ) ? Math.floor(Math.log10(minQ)) : -12;
  var qHi = Math.log10(R.max_q > 0 ? R.max_q : 1);
  if (!(qLo < qHi)) { qLo = qHi - 1; }
  phiIn.max = String(phiMax);
  qIn.min = String(qLo);
  qIn.max = String(qHi);
  function syncControls() {
    phiIn.value = String(Math.min(S.phi, phiMax));
    $('pm-phi-out').textContent = S.phi > 0 ? String(S.phi) : 'any';
    qIn.value = String(S.q === null ? qHi : Math.max(qLo, Math.log10(Math.max(S.q, 1e-300))));
    $('pm-q-out').textContent = S.q === null ? String(R.max_q) : qtext(S.q);
    $('pm-neg').checked = S.neg;
    if (SEG.length) { $('pm-seg').value = S.seg ? S.seg[0] + ':' + S.seg[1] : ''; }
    if (S.item >= 0) { input.value = I.name[S.item]; }
  }
  phiIn.addEventListener('input', function () {
    S.phi = Math.round(parseFloat(phiIn.value) * 100) / 100;
    syncControls(); render();
  });
  qIn.addEventListener('input', function () {
    var x = parseFloat(qIn.value);
    S.q = x >= qHi ? null : Number(Math.pow(10, x).toPrecision(2));
    syncControls(); render();
  });
  if (hasNeg) {
    $('pm-neg-box').hidden = false;
    $('pm-neg').addEventListener('change', function () { S.neg = $('pm-neg').checked; render(); });
  }
  $('pm-clear').addEventListener('click', function () {
    S.item = -1; S.cluster = 0; S.missing = null; S.phi = 0; S.q = null; S.neg = true; S.seg = null;
    input.value = '';
    syncControls(); render();
  });

  /* ---- zoom and pan ------------------------------------------------------------------------ */
  var view = $('pm-view'), vb0 = null, Z = { z: 1, cx: 0, cy: 0 };
  if (svg) {
    var b = (svg.getAttribute('viewBox') || '').split(/[\s,]+/).map(Number);
    if (b.length !== 4 || !b.every(isFinite)) {
      b = [0, 0, parseFloat(svg.getAttribute('width')) || 1000, parseFloat(svg.getAttribute('height')) || 800];
    }
    /* the view holds the drawing itself: the page shows the title and the clusters (the
     * SVG's own title and legend stay outside the box) */
    vb0 = b;
    b = fitBox(b);
    vb0 = b;
    Z.cx = b[0] + b[2] / 2; Z.cy = b[1] + b[3] / 2;
    sizeLabels(); /* labels grown to 11 px may reach past the box: fit once more */
    b = fitBox((svg.getAttribute('viewBox') || '').split(/[\s,]+/).map(Number));
    vb0 = b;
    Z.cx = b[0] + b[2] / 2; Z.cy = b[1] + b[3] / 2;
  }
  function fitBox(full) {
    var box = null, b = full.slice();
    svg.querySelectorAll('.node, .label, .region, .cluster-label').forEach(function (e) {
      var r = e.getBBox();
      if (!(r.width > 0 || r.height > 0)) { return; }
      if (!box) { box = [r.x, r.y, r.x + r.width, r.y + r.height]; return; }
      box = [Math.min(box[0], r.x), Math.min(box[1], r.y), Math.max(box[2], r.x + r.width),
             Math.max(box[3], r.y + r.height)];
    });
    if (box) {
      var pad = 14;
      /* the marks, labels grown for legibility included (they may reach past the canvas) */
      b = [box[0] - pad, box[1] - pad, box[2] - box[0] + 2 * pad, box[3] - box[1] + 2 * pad];
    }
    return b;
  }
  function scale0() {
    return Math.min(view.clientWidth / vb0[2], view.clientHeight / vb0[3]) || 1;
  }
  var pending = false;
  function applyZoom() {
    if (!vb0) { return; }
    var w = vb0[2] / Z.z, h = vb0[3] / Z.z;
    Z.cx = Math.min(Math.max(Z.cx, vb0[0] + w / 2), vb0[0] + vb0[2] - w / 2);
    Z.cy = Math.min(Math.max(Z.cy, vb0[1] + h / 2), vb0[1] + vb0[3] - h / 2);
    svg.setAttribute('viewBox', [Z.cx - w / 2, Z.cy - h / 2, w, h].join(' '));
    if (pending) { return; }
    pending = true;
    requestAnimationFrame(function () { pending = false; sizeLabels(); });
  }
  /* labels: at least 11 px on the screen, and no larger than drawn once zoomed in */
  function sizeLabels() {
    var g = scale0() * Z.z;
    labels.forEach(function (x) {
      var px = Math.min(Math.max(x[1] * g, 11), Math.max(x[1], 11));
      x[0].setAttribute('font-size', (px / g).toFixed(3));
    });
  }
  function zoomAt(f, px, py) {
    var z = Math.min(Math.max(Z.z * f, 1), 16);
    if (px !== undefined) {
      var r = view.getBoundingClientRect(), s = scale0() * Z.z;
      var ox = (view.clientWidth - vb0[2] * scale0()) / 2, oy = (view.clientHeight - vb0[3] * scale0()) / 2;
      /* the map point under the pointer stays under it */
      var ux = Z.cx + (px - r.left - view.clientWidth / 2) / s;
      var uy = Z.cy + (py - r.top - view.clientHeight / 2) / s;
      void ox; void oy;
      var s2 = scale0() * z;
      Z.cx = ux - (px - r.left - view.clientWidth / 2) / s2;
      Z.cy = uy - (py - r.top - view.clientHeight / 2) / s2;
    }
    Z.z = z;
    applyZoom();
  }
  function pan(dx, dy) { var s = scale0() * Z.z; Z.cx -= dx / s; Z.cy -= dy / s; applyZoom(); }
  if (svg) {
    view.addEventListener('wheel', function (ev) {
      ev.preventDefault();
      zoomAt(ev.deltaY < 0 ? 1.2 : 1 / 1.2, ev.clientX, ev.clientY);
    }, { passive: false });
    var drag = null;
    view.addEventListener('pointerdown', function (ev) {
      if (ev.button !== 0 || ev.target.closest('button')) { return; }
      drag = { x: ev.clientX, y: ev.clientY, moved: false, target: ev.target };
    });
    window.addEventListener('pointermove', function (ev) {
      if (!drag) { return; }
      var dx = ev.clientX - drag.x, dy = ev.clientY - drag.y;
      if (!drag.moved && Math.abs(dx) + Math.abs(dy) < 4) { return; }
      drag.moved = true;
      view.classList.add('pm-dragging');
      pan(dx, dy);
      drag.x = ev.clientX; drag.y = ev.clientY;
    });
    window.addEventListener('pointerup', function () {
      if (drag && !drag.moved) { clickMark(drag.target); }
      drag = null;
      view.classList.remove('pm-dragging');
    });
    view.addEventListener('keydown', function (ev) {
      var step = 60;
      if (ev.target !== view) { return; }
      if (ev.key === 'ArrowLeft') { pan(step, 0); }
      else if (ev.key === 'ArrowRight') { pan(-step, 0); }
      else if (ev.key === 'ArrowUp') { pan(0, step); }
      else if (ev.key === 'ArrowDown') { pan(0, -step); }
      else if (ev.key === '+' || ev.key === '=') { zoomAt(1.25); }
      else if (ev.key === '-' || ev.key === '_') { zoomAt(1 / 1.25); }
      else if (ev.key === '0') { Z.z = 1; applyZoom(); }
      else { return; }
      ev.preventDefault();
    });
    $('pm-zoom-in').addEventListener('click', function () { zoomAt(1.25); });
    $('pm-zoom-out').addEventListener('click', function () { zoomAt(1 / 1.25); });
    $('pm-zoom-fit').addEventListener('click', function () { Z.z = 1; applyZoom(); });
    window.addEventListener('resize', applyZoom);
  }
  function clickMark(t) {
    var e = t.closest ? t.closest('.node[data-item], .label[data-item]') : null;
    if (!e) { return; }
    var v = byKey.get(e.getAttribute('data-item'));
    if (v !== undefined) { choose(v); }
  }

  /* ---- header and footer ----------------------------------------------------------------- */
  function footer() {
    var f = $('pm-footer');
    f.appendChild(document.createTextNode('pairmap ' + R.version + ' \u00b7 input '));
    f.appendChild(bdi(R.input || ''));
    f.appendChild(document.createTextNode(' (' + thousands(R.bytes) + ' bytes, ' +
      thousands(R.lines) + ' lines; ' + thousands(R.respondents) + ' ' + UNIT + ', ' +
      thousands(R.items_read) + ' items) \u00b7 options '));
    f.appendChild(el('code', { id: 'pm-options' }, R.options.length ? R.options.join(' ') : '(none)'));
    f.appendChild(document.createTextNode(' \u00b7 pairs kept with together \u2265 ' + R.min_count +
      ', q \u2264 ' + R.max_q + ', ' + R.sign + ' associations' +
      (R.min_phi > 0 ? ', |phi| \u2265 ' + R.min_phi : '') +
      (R.min_lift > 0 ? ', lift \u2265 ' + R.min_lift : '') +
      (R.top_edges > 0 ? ', top ' + R.top_edges + ' edges' : '')));
    if (R.sha256) { f.appendChild(document.createTextNode(' \u00b7 SHA-256 ' + R.sha256.slice(0, 12) + '\u2026')); }
    $('pm-sub').textContent = thousands(R.respondents) + ' ' + UNIT + ' \u00b7 ' + n +
      ' items with a defined phi, ' + drawnCount + ' of them drawn (search finds all) \u00b7 ' + m +
      ' kept pairs \u00b7 ' + C.length + ' clusters';
  }

  buildClusters();
  footer();
  readHash();
  syncControls();
  applyZoom();
  render();
  document.body.setAttribute('data-ready', '1');
})();
