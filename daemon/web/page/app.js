// forewarden planner page: the attention list, the series view with its actions, and the
// policies and feeds view. Plain script, no build step; every text from the service is put in
// the page as text (textContent), never as markup. Charts: Debian's dygraphs, compiled into the
// service with this file.
'use strict';

(function () {
  const TOKEN_KEY = 'forewarden.token';
  const ASKED_KEY = 'forewarden.asked';
  const state = {
    token: sessionStorage.getItem(TOKEN_KEY) || '',
    access: null,
    policies: null,
    charts: [],
    view: 0,        // bumped by every route; stale answers are dropped
    flash: null,    // an answer to show after the view reloads
    current: -1,    // the attention list's selected row
  };
  const SEVERITY_SHAPE = { critical: '\u25C6', warning: '\u25B2', info: '\u25CF' };
  const COLORS = { actual: '#23407a', forecast: '#b35c00', trigg: '#4b3a8c', cusum: '#227066' };

  // The legend plugin writes inline style attributes, which the page's Content-Security-Policy
  // refuses; the page shows its own read-out instead.
  if (window.Dygraph && Dygraph.PLUGINS && Dygraph.Plugins) {
    Dygraph.PLUGINS = Dygraph.PLUGINS.filter((p) => p !== Dygraph.Plugins.Legend);
  }

  // ---- small helpers ----------------------------------------------------------------------

  // el('a', {href: '#/', class: 'x'}, 'text', child): children are text or nodes.
  function el(tag, attrs, ...kids) {
    const node = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === undefined || v === null || v === false) continue;
      if (k === 'text') node.textContent = String(v);
      else if (k === 'class') node.className = v;
      else if (k.startsWith('on')) node.addEventListener(k.slice(2), v);
      else if (k === 'dataset') Object.assign(node.dataset, v);
      else node.setAttribute(k, v === true ? '' : String(v));
    }
    for (const kid of kids.flat()) {
      if (kid === null || kid === undefined || kid === false) continue;
      node.append(kid instanceof Node ? kid : document.createTextNode(String(kid)));
    }
    return node;
  }

  function fmt(v, digits) {
    if (v === null || v === undefined || !isFinite(v)) return '\u2014';
    const d = digits === undefined ? 2 : digits;
    const abs = Math.abs(v);
    if (abs >= 1e5) return Math.round(v).toLocaleString('en');
    return Number(v).toLocaleString('en', { maximumFractionDigits: d, minimumFractionDigits: 0 });
  }

  function periodDate(text) {
    return new Date(text + 'T00:00:00Z');
  }

  function sevTag(severity, extra) {
    return el('span', { class: 'tag sev-' + severity },
      (SEVERITY_SHAPE[severity] || '') + ' ' + (extra ? extra + ' \u00B7 ' : '') + severity);
  }

  function labelsText(labels) {
    if (!labels || typeof labels !== 'object') return '';
    return Object.entries(labels).map(([k, v]) => k + ':' + v).join('  ');
  }

  function constantsText(constants, adaptive) {
    const text = Object.entries(constants || {}).map(([k, x]) => k + ' ' + fmt(x, 3)).join(', ');
    return adaptive ? text + ', adaptive alpha ' + fmt(adaptive.floor, 3) + '\u2013' + fmt(adaptive.cap, 3) : text;
  }

  function seriesHref(key) {
    return '#/series/' + encodeURIComponent(key);
  }

  function banner(message) {
    const b = document.getElementById('banner');
    if (!message) {
      b.hidden = true;
      b.textContent = '';
      return;
    }
    b.hidden = false;
    b.textContent = message;
  }

  function describeError(err) {
    if (err && err.status === 401) return 'The service needs a token for this: ' + err.message + '. Enter yours with \u201cEnter token\u201d at the top.';
    if (err && err.status === 403) return 'The service refused: ' + err.message + '.';
    if (err && err.status) return 'The service answered ' + err.status + ': ' + err.message;
    return 'The service could not be reached: ' + (err && err.message ? err.message : err);
  }

  async function api(path, opts) {
    const o = opts || {};
    const headers = { Accept: 'application/json' };
    const token = o.token !== undefined ? o.token : state.token;
    if (token) headers.Authorization = 'Bearer ' + token;
    if (o.body !== undefined) headers['Content-Type'] = 'application/json';
    const r = await fetch(path, {
      method: o.method || 'GET',
      headers,
      body: o.body === undefined ? undefined : JSON.stringify(o.body),
      cache: 'no-store',
      // instances sharing series redirect to the one holding a series: said, not followed
      redirect: 'manual',
    });
    if (r.type === 'opaqueredirect') {
      const err = new Error('held by another instance');
      err.status = 307;
      throw err;
    }
    const text = await r.text();
    let data = null;
    try {
      data = text ? JSON.parse(text) : null;
    } catch (e) {
      data = null;
    }
    if (!r.ok) {
      const err = new Error((data && data.error) || ('HTTP ' + r.status));
      err.status = r.status;
      err.data = data;
      throw err;
    }
    return data;
  }

  async function loadPolicies() {
    if (!state.policies) state.policies = (await api('v1/policies')).policies;
    return state.policies;
  }

  function destroyCharts() {
    for (const g of state.charts) {
      try { g.destroy(); } catch (e) { /* already gone */ }
    }
    state.charts = [];
    window.forewardenCharts = {};
  }

  function newView(nav) {
    destroyCharts();
    state.view += 1;
    for (const id of ['nav-attention', 'nav-policies']) {
      const a = document.getElementById(id);
      if (id === 'nav-' + nav) a.setAttribute('aria-current', 'page');
      else a.removeAttribute('aria-current');
    }
    const main = document.getElementById('main');
    main.replaceChildren();
    main.dataset.ready = '';
    return { seq: state.view, main };
  }

  function stillCurrent(v) {
    return v.seq === state.view;
  }

  // A view whose data did not come: the service's answer in its place.
  function failed(v, err) {
    if (stillCurrent(v)) v.main.append(el('p', { class: 'answer failed', role: 'alert' }, describeError(err)));
  }

  // ---- access: tokens ---------------------------------------------------------------------

  function canWork() {
    const a = state.access;
    return !!a && a.may.work_alerts;
  }
  // Whether the service records the token's name as who acts (no name to type): with a
  // person's token, and in people mode before one is given (the shared token aside).
  function namesRecorded() {
    const a = state.access;
    return !!a && (a.names_recorded || (a.mode === 'people' && !a.you));
  }

  function renderAccess() {
    const box = document.getElementById('access');
    box.replaceChildren();
    const a = state.access;
    if (!a) return;
    if (a.mode === 'open') {
      box.append(el('span', { id: 'access-state', text: 'Open service: no token needed' }));
      return;
    }
    if (a.you) {
      const who = a.you.name ? a.you.name + ' (' + a.you.role + ')' : 'the shared ' + a.you.role + ' token';
      box.append(el('span', { id: 'access-state', text: 'Signed in as ' + who }),
        el('button', { type: 'button', class: 'quiet', id: 'token-forget', onclick: forgetToken }, 'Forget token'));
    } else {
      box.append(el('span', { id: 'access-state', text: a.reads_need_token ? 'Token needed to read' : 'Read-only' }),
        el('button', { type: 'button', class: 'quiet', id: 'token-open', onclick: openTokenPanel }, 'Enter token'));
    }
  }

  function openTokenPanel() {
    const panel = document.getElementById('token-panel');
    panel.hidden = false;
    document.getElementById('token-message').textContent = '';
    document.getElementById('token-input').focus();
  }

  function forgetToken() {
    state.token = '';
    sessionStorage.removeItem(TOKEN_KEY);
    refreshAccess().then(route);
  }

  async function refreshAccess() {
    try {
      state.access = await api('v1/access');
      if (state.token && state.access.token_accepted === false) {
        state.token = '';
        sessionStorage.removeItem(TOKEN_KEY);
        state.access = await api('v1/access');
      }
    } catch (err) {
      banner(describeError(err));
    }
    renderAccess();
  }

  async function useToken(ev) {
    ev.preventDefault();
    const input = document.getElementById('token-input');
    const message = document.getElementById('token-message');
    const candidate = input.value.trim();
    if (!candidate) return;
    try {
      const a = await api('v1/access', { token: candidate });
      if (!a.token_accepted) {
        message.textContent = 'The service does not know that token.';
        return;
      }
      state.token = candidate;
      sessionStorage.setItem(TOKEN_KEY, candidate);
      input.value = '';
      document.getElementById('token-panel').hidden = true;
      state.access = a;
      renderAccess();
      banner('');
      route();
    } catch (err) {
      message.textContent = describeError(err);
    }
  }

  // ---- the attention list -----------------------------------------------------------------

  const STATES = [
    ['attention', 'Needs attention (open, acknowledged, near a limit)'],
    ['open', 'Open alerts'],
    ['acknowledged', 'Acknowledged alerts'],
    ['snoozed', 'Snoozed alerts'],
    ['near', 'Near a limit, no alert'],
    ['unresolved', 'Every unresolved alert'],
    ['stale', 'Stale (actuals overdue)'],
  ];
  const FILTERS = ['state', 'policy', 'label', 'rule', 'severity', 'q'];
  const PAGE = 50;
  const AHEAD = 13;  // periods forecast ahead on the series view

  function attentionHref(params) {
    const q = new URLSearchParams();
    for (const [k, v] of Object.entries(params)) if (v !== '' && v !== undefined && v !== null) q.set(k, v);
    const s = q.toString();
    return '#/' + (s ? '?' + s : '');
  }

  function filterForm(params, policies) {
    const select = (name, label, options) => {
      const s = el('select', { id: 'f-' + name, name });
      for (const [value, text] of options) {
        const o = el('option', { value }, text);
        if ((params.get(name) || '') === value) o.selected = true;
        s.append(o);
      }
      return el('div', { class: 'field' }, el('label', { for: 'f-' + name }, label), s);
    };
    const input = (name, label, placeholder) => el('div', { class: 'field' },
      el('label', { for: 'f-' + name }, label),
      el('input', { id: 'f-' + name, name, type: 'search', value: params.get(name) || '', placeholder, autocomplete: 'off' }));
    const rules = [...new Set(policies.flatMap((p) => p.rules.map((r) => r.name)))].sort();
    const form = el('form', { class: 'filters', id: 'filters', role: 'search', 'aria-label': 'Filter the list' },
      select('state', 'Show', STATES.map(([v, t]) => [v === 'attention' ? '' : v, t])),
      select('policy', 'Policy', [['', 'Any policy'], ...policies.map((p) => [p.name, p.name])]),
      select('rule', 'Rule', [['', 'Any rule'], ...rules.map((r) => [r, r])]),
      select('severity', 'Severity', [['', 'Any severity'], ['critical', 'critical'], ['warning', 'warning'], ['info', 'info']]),
      input('label', 'Label (name:value)', 'region:north'),
      input('q', 'Key contains', 'store-012'),
      el('div', { class: 'field inline' },
        el('button', { type: 'submit', id: 'f-apply' }, 'Show'),
        el('button', { type: 'button', class: 'quiet', id: 'f-clear', onclick: () => { location.hash = '#/'; } }, 'Clear')));
    form.addEventListener('submit', (ev) => {
      ev.preventDefault();
      const next = {};
      for (const f of FILTERS) next[f] = form.elements[f].value.trim();
      location.hash = attentionHref(next);
    });
    return form;
  }

  function countsTable(counts) {
    const cols = [['open', 'Open'], ['acknowledged', 'Acknowledged'], ['snoozed', 'Snoozed'], ['stale', 'Stale'],
      ['warming', 'Warming up'], ['in_control', 'In control'], ['near', 'Near a limit'], ['series', 'Series']];
    const link = { open: 'open', acknowledged: 'acknowledged', snoozed: 'snoozed', stale: 'stale', near: 'near' };
    const head = el('tr', {}, el('th', { scope: 'col' }, 'Policy'), cols.map(([, t]) => el('th', { scope: 'col', class: 'num' }, t)));
    const body = counts.map((c) => el('tr', {},
      el('th', { scope: 'row' }, c.policy),
      cols.map(([k]) => el('td', { class: 'num', dataset: { count: k } },
        link[k] && c[k] > 0 ? el('a', { href: attentionHref({ policy: c.policy, state: link[k] }), 'aria-label': c[k] + ' ' + k + ' in ' + c.policy }, fmt(c[k], 0)) : fmt(c[k], 0)))));
    return el('div', { class: 'table-wrap' }, el('table', { class: 'counts', id: 'counts' },
      el('caption', { class: 'visually-hidden' }, 'Series and alerts per policy'),
      el('thead', {}, head), el('tbody', {}, body)));
  }

  function alertCell(row) {
    const cell = el('td', {});
    for (const a of row.alerts) {
      cell.append(el('div', {}, sevTag(a.severity, a.rule),
        el('span', { class: 'tag st-mute' }, a.state), el('span', { class: 'muted' }, ' since ' + a.opened_period)));
    }
    if (!row.alerts.length) {
      if (row.holding.length) cell.append(el('div', {}, el('span', { class: 'tag st-mute' }, 'holding: ' + row.holding.join(', '))));
      else if (row.nearest_rule) cell.append(el('div', {}, el('span', { class: 'tag st-mute' }, '\u25D4 near ' + row.nearest_rule + ' (' + Math.round(100 * row.closeness) + ' % of its limit)')));
    }
    return cell;
  }

  function sparkline(box, actual, forecast) {
    const data = actual.map((a, i) => [i, a, forecast[i]]);
    box.dataset.points = String(data.length);
    if (!window.Dygraph || data.length < 2) return;
    const g = new Dygraph(box, data, {
      labels: ['period', 'actual', 'forecast'],
      width: box.clientWidth || 150,
      height: 34,
      colors: [COLORS.actual, COLORS.forecast],
      strokeWidth: 1.4,
      drawGrid: false,
      axes: { x: { drawAxis: false, drawGrid: false }, y: { drawAxis: false, drawGrid: false } },
      interactionModel: {},
      highlightCircleSize: 0,
      rightGap: 0,
      xRangePad: 2,
      yRangePad: 3,
      series: { forecast: { strokePattern: [3, 2] } },
    });
    state.charts.push(g);
  }

  async function showAttention(params) {
    const v = newView('attention');
    const main = v.main;
    main.append(el('h1', {}, 'Attention list'),
      el('p', { class: 'sub' }, 'Series that need a planner now: open alerts first, the most severe on top, then acknowledged ones, then series close to a limit. Move with \u2191 \u2193 or j k, open with Enter.'));
    const q = new URLSearchParams();
    for (const f of [...FILTERS, 'offset']) if (params.get(f)) q.set(f, params.get(f));
    q.set('limit', String(PAGE));
    let data, policies;
    try {
      [data, policies] = await Promise.all([api('v1/attention?' + q.toString()), loadPolicies()]);
    } catch (err) {
      failed(v, err);
      return;
    }
    if (!stillCurrent(v)) return;
    banner('');
    sharingNote(v);
    main.append(countsTable(data.counts), el('h2', { class: 'visually-hidden' }, 'Filters'), filterForm(params, policies));
    const offset = data.offset;
    const shown = data.rows.length;
    const summary = el('p', { id: 'list-summary', role: 'status' },
      data.total === 0 ? 'Nothing needs attention for this filter.'
        : 'Series ' + (offset + 1) + '\u2013' + (offset + shown) + ' of ' + data.total);
    const head = el('tr', {},
      el('th', { scope: 'col' }, 'Series'), el('th', { scope: 'col', class: 'hide-narrow' }, 'Policy'),
      el('th', { scope: 'col' }, 'Rules and alerts'), el('th', { scope: 'col', class: 'num' }, 'Last actual / its forecast'),
      el('th', { scope: 'col', class: 'num hide-narrow' }, 'Trigg'), el('th', { scope: 'col', class: 'num hide-narrow' }, 'Cumulative'),
      el('th', { scope: 'col', class: 'hide-narrow' }, 'Last 26 periods'));
    const body = el('tbody', {});
    const sparks = [];
    data.rows.forEach((row, i) => {
      const spark = el('div', { class: 'spark', role: 'img', 'aria-label': 'actuals and forecasts of the last ' + row.recent_actual.length + ' periods' });
      sparks.push([spark, row]);
      const tr = el('tr', { class: 'pick', 'data-key': row.key, 'data-group': row.group, tabindex: '-1' },
        el('td', {}, el('a', { class: 'key', href: seriesHref(row.key) }, row.key),
          el('div', { class: 'labels' }, labelsText(row.labels))),
        el('td', { class: 'hide-narrow' }, row.policy),
        alertCell(row),
        el('td', { class: 'num' }, fmt(row.last_actual), ' / ', fmt(row.last_forecast), el('div', { class: 'muted' }, row.last_period || '')),
        el('td', { class: 'num hide-narrow' }, fmt(row.trigg_signal)),
        el('td', { class: 'num hide-narrow' }, fmt(row.cusum_signal)),
        el('td', { class: 'hide-narrow' }, spark));
      tr.addEventListener('click', (ev) => {
        if (ev.target.closest('a')) return;
        location.hash = seriesHref(row.key);
      });
      tr.addEventListener('focus', () => select(i, false));
      body.append(tr);
    });
    const table = el('div', { class: 'table-wrap' }, el('table', { id: 'attention' },
      el('caption', { class: 'visually-hidden' }, 'Series that need attention'), el('thead', {}, head), body));
    const pager = el('div', { class: 'pager' });
    const base = {};
    for (const f of FILTERS) base[f] = params.get(f) || '';
    if (offset > 0) pager.append(el('a', { class: 'button', id: 'page-prev', href: attentionHref({ ...base, offset: Math.max(0, offset - PAGE) || '' }) }, '\u2190 Previous'));
    if (offset + shown < data.total) pager.append(el('a', { class: 'button', id: 'page-next', href: attentionHref({ ...base, offset: offset + PAGE }) }, 'Next \u2192'));
    main.append(summary, table, pager);
    for (const [box, row] of sparks) sparkline(box, row.recent_actual, row.recent_forecast);
    state.current = -1;
    if (window.forewardenReadyMs === undefined) window.forewardenReadyMs = performance.now();
    main.dataset.ready = 'attention';
  }

  function rowsOfList() {
    return [...document.querySelectorAll('#attention tbody tr')];
  }

  function select(i, focus) {
    const rows = rowsOfList();
    if (!rows.length) return;
    const n = Math.max(0, Math.min(rows.length - 1, i));
    rows.forEach((r, j) => {
      r.classList.toggle('current', j === n);
      if (j === n) r.setAttribute('aria-selected', 'true');
      else r.removeAttribute('aria-selected');
    });
    state.current = n;
    if (focus) {
      rows[n].focus();
      rows[n].scrollIntoView({ block: 'nearest' });
    }
  }

  document.addEventListener('keydown', (ev) => {
    if (!document.getElementById('attention')) return;
    const t = ev.target;
    if (t && (t.tagName === 'INPUT' || t.tagName === 'SELECT' || t.tagName === 'TEXTAREA' || t.tagName === 'BUTTON')) return;
    if (ev.altKey || ev.ctrlKey || ev.metaKey) return;
    if (ev.key === 'ArrowDown' || ev.key === 'j') {
      ev.preventDefault();
      select(state.current + 1, true);
    } else if (ev.key === 'ArrowUp' || ev.key === 'k') {
      ev.preventDefault();
      select(state.current < 0 ? 0 : state.current - 1, true);
    } else if (ev.key === 'Enter' && state.current >= 0 && !(t && t.tagName === 'A')) {
      const row = rowsOfList()[state.current];
      if (row) {
        ev.preventDefault();
        location.hash = seriesHref(row.dataset.key);
      }
    }
  });

  // ---- the series view --------------------------------------------------------------------

  // Alert episodes as [from date, to date, label] from the series' alerts.
  function episodes(alerts, lastPeriod) {
    return alerts.map((a) => [periodDate(a.opened_period).getTime(),
      periodDate(a.resolved_period || lastPeriod).getTime(), a.rule + ' #' + a.id, a.severity]);
  }

  function shade(spans, withText) {
    return (ctx, area, g) => {
      ctx.save();
      spans.forEach(([from, to, label], i) => {
        const x0 = g.toDomXCoord(from);
        const x1 = Math.max(g.toDomXCoord(to), x0 + 3);
        if (x1 < area.x || x0 > area.x + area.w) return;
        ctx.fillStyle = 'rgba(138, 28, 23, 0.12)';
        ctx.fillRect(x0, area.y, x1 - x0, area.h);
        ctx.strokeStyle = 'rgba(138, 28, 23, 0.55)';
        ctx.setLineDash([4, 3]);
        ctx.strokeRect(x0 + 0.5, area.y + 0.5, x1 - x0, area.h - 1);
        if (withText) {
          ctx.setLineDash([]);
          ctx.fillStyle = '#8a1c17';
          ctx.font = '12px system-ui, sans-serif';
          ctx.fillText(label, x0 + 3, area.y + 13 + 14 * (i % 4));
        }
      });
      ctx.restore();
    };
  }

  function limitLines(lines) {
    return (ctx, area, g) => {
      ctx.save();
      ctx.setLineDash([6, 4]);
      ctx.font = '11px system-ui, sans-serif';
      for (const l of lines) {
        const y = g.toDomYCoord(l.value, l.axis);
        if (!isFinite(y) || y < area.y || y > area.y + area.h) continue;
        ctx.strokeStyle = l.color;
        ctx.beginPath();
        ctx.moveTo(area.x, y);
        ctx.lineTo(area.x + area.w, y);
        ctx.stroke();
        ctx.fillStyle = l.color;
        ctx.fillText(l.label, l.axis === 1 ? area.x + area.w - ctx.measureText(l.label).width - 4 : area.x + 4, y - 3);
      }
      ctx.restore();
    };
  }

  function csvCell(v) {
    const s = v === null || v === undefined ? '' : String(v);
    return /[",\n\r]/.test(s) ? '"' + s.replace(/"/g, '""') + '"' : s;
  }

  const ROW_COLUMNS = [
    ['period', 'Period'], ['actual', 'Actual'], ['forecast', 'Forecast'], ['error', 'Error'], ['alpha', 'Alpha'],
    ['smoothed_error', 'Smoothed error'], ['mad', 'MAD'], ['cusum', 'Cumulative error'],
    ['trigg_signal', 'Trigg'], ['cusum_signal', 'Cumulative signal'], ['alerts', 'Rules holding'],
  ];

  function rowValue(r, k) {
    if (k === 'alerts') return (r.alerts || []).join(' ');
    if (k === 'actual' && r.filled) return '';
    return r[k];
  }

  function downloadCsv(key, rows) {
    const lines = [ROW_COLUMNS.map(([k]) => k).join(',')];
    for (const r of rows) lines.push(ROW_COLUMNS.map(([k]) => csvCell(rowValue(r, k))).join(','));
    const blob = new Blob([lines.join('\n') + '\n'], { type: 'text/csv' });
    const a = el('a', { href: URL.createObjectURL(blob), download: key.replace(/[^A-Za-z0-9._-]+/g, '_') + '.csv' });
    document.body.append(a);
    a.click();
    setTimeout(() => { URL.revokeObjectURL(a.href); a.remove(); }, 1000);
  }

  function fact(name, value, id) {
    return el('div', { class: 'fact' }, el('div', { class: 'name' }, name), el('div', { class: 'value', id }, value));
  }

  function readout(box, rows, index) {
    const r = rows[index];
    if (!r) {
      box.textContent = 'Point at the chart to read a period.';
      return;
    }
    box.textContent = r.period + ': actual ' + (r.filled ? 'missing (filled)' : fmt(r.actual)) +
      ', forecast ' + fmt(r.forecast) + ' (' + fmt(r.lower) + ' to ' + fmt(r.upper) + ')' +
      ', error ' + fmt(r.error) + ', MAD ' + fmt(r.mad) + ', Trigg ' + fmt(r.trigg_signal) +
      ', cumulative signal ' + fmt(r.cusum_signal) + ', alpha ' + fmt(r.alpha, 3) +
      ((r.alerts || []).length ? ', holding: ' + r.alerts.join(', ') : '');
  }

  function charts(box, detail, rows, alerts, policy, ahead) {
    const readoutBox = el('p', { class: 'readout', id: 'readout', 'aria-live': 'polite' });
    readout(readoutBox, rows, -1);
    const mainDiv = el('div', { class: 'chart', id: 'chart-main', role: 'img', 'aria-label': 'Actuals, forecasts and prediction interval of ' + rows.length + ' periods' });
    const sigDiv = el('div', { class: 'chart signals', id: 'chart-signals', role: 'img', 'aria-label': 'Tracking signals with the rules\u2019 limits' });
    const zoom = el('div', { class: 'inline', role: 'group', 'aria-label': 'Time range' });
    box.append(
      el('div', { class: 'chart-box' }, el('p', { class: 'chart-title' }, 'Actuals and forecasts'),
        el('div', { class: 'key-legend' }, el('span', {}, el('span', { class: 'swatch sw-actual' }), 'actual'),
          el('span', {}, el('span', { class: 'swatch sw-forecast' }), 'forecast made before the actual, then ' + AHEAD + ' periods ahead'),
          el('span', {}, el('span', { class: 'swatch sw-band' }), Math.round(100 * detail.coverage) + ' % prediction interval'),
          el('span', {}, el('span', { class: 'swatch sw-episode' }), 'alert episode (rule #id)')),
        mainDiv),
      el('div', { class: 'chart-box' }, el('p', { class: 'chart-title' }, 'Tracking signals'),
        el('div', { class: 'key-legend' }, el('span', {}, el('span', { class: 'swatch sw-trigg' }), 'Trigg\u2019s signal (left axis)'),
          el('span', {}, el('span', { class: 'swatch sw-cusum' }), 'cumulative signal, in MADs (right axis)'),
          el('span', {}, 'dashed: rule limits')),
        sigDiv),
      zoom, readoutBox);
    mainDiv.dataset.points = String(rows.length);
    sigDiv.dataset.points = String(rows.length);
    if (!window.Dygraph || rows.length === 0) return;
    const triple = (v) => (v === null || v === undefined ? null : [v, v, v]);
    const mainData = rows.map((r) => [periodDate(r.period), r.filled ? null : triple(r.actual),
      r.forecast === null || r.forecast === undefined ? null
        : [r.lower === null ? r.forecast : r.lower, r.forecast, r.upper === null ? r.forecast : r.upper]]);
    // the forecasts ahead with their intervals (GET /v1/series/{key}/forecast)
    for (const a of ahead) {
      mainData.push([periodDate(a.period), null,
        [a.lower === null ? a.forecast : a.lower, a.forecast, a.upper === null ? a.forecast : a.upper]]);
    }
    const spans = episodes(alerts, detail.last_period || rows[rows.length - 1].period);
    const lines = [];
    const limitColor = { trigg: COLORS.trigg, cusum: COLORS.cusum };
    for (const rule of policy ? policy.rules : []) {
      if (!(rule.signal === 'trigg' || (rule.signal === 'cusum' && !rule.periods))) continue;
      const axis = rule.signal === 'trigg' ? 0 : 1;
      const signs = rule.direction === 'under' ? [1] : rule.direction === 'over' ? [-1] : [1, -1];
      // a calibrated rule's limit depends on the series' age: the one its next actual is judged at
      let limit = rule.limit;
      for (const band of rule.limits_by_age || []) {
        if (detail.age >= band.from && (band.until === null || detail.age < band.until)) limit = band.limit;
      }
      for (const s of signs) lines.push({ value: s * limit, axis, color: limitColor[rule.signal], label: rule.name + ' ' + (s > 0 ? '+' : '\u2212') + fmt(limit) });
    }
    let syncing = false;
    const graphs = [];
    const sync = (me) => (g, initial) => {
      if (initial || syncing) return;
      syncing = true;
      for (const other of graphs) if (other !== me()) other.updateOptions({ dateWindow: g.xAxisRange() });
      syncing = false;
    };
    const highlight = (me) => (ev, x, pts, row) => {
      readout(readoutBox, rows, row);
      for (const other of graphs) if (other !== me() && row < other.numRows()) other.setSelection(row);
    };
    const common = {
      axisLabelFontSize: 12,
      labelsUTC: true,
      highlightCircleSize: 3,
      animatedZooms: false,
      gridLineColor: '#e3e0d8',
      axisLineColor: '#9a968c',
      unhighlightCallback: () => readout(readoutBox, rows, -1),
    };
    let g1 = null;
    let g2 = null;
    g1 = new Dygraph(mainDiv, mainData, Object.assign({}, common, {
      labels: ['period', 'actual', 'forecast'],
      customBars: true,
      colors: [COLORS.actual, COLORS.forecast],
      fillAlpha: 0.2,
      strokeWidth: 1.6,
      series: { forecast: { strokePattern: [5, 3] } },
      underlayCallback: shade(spans, true),
      drawCallback: sync(() => g1),
      highlightCallback: highlight(() => g1),
    }));
    const sigData = rows.map((r) => [periodDate(r.period), r.trigg_signal === undefined ? null : r.trigg_signal,
      r.cusum_signal === undefined ? null : r.cusum_signal]);
    g2 = new Dygraph(sigDiv, sigData, Object.assign({}, common, {
      labels: ['period', 'Trigg', 'cumulative'],
      colors: [COLORS.trigg, COLORS.cusum],
      strokeWidth: 1.4,
      series: { cumulative: { axis: 'y2' } },
      axes: { y: { valueRange: [-1.05, 1.05] }, y2: { independentTicks: true, drawGrid: false } },
      ylabel: 'Trigg',
      y2label: 'MADs',
      underlayCallback: (ctx, area, g) => { shade(spans, false)(ctx, area, g); limitLines(lines)(ctx, area, g); },
      drawCallback: sync(() => g2),
      highlightCallback: highlight(() => g2),
    }));
    graphs.push(g1, g2);
    state.charts.push(g1, g2);
    window.forewardenCharts = { main: g1, signals: g2 };
    const lastTime = mainData[mainData.length - 1][0].getTime();
    const range = (n) => () => {
      if (!n) {
        for (const g of graphs) g.updateOptions({ dateWindow: null });
        return;
      }
      const from = n >= mainData.length ? mainData[0][0].getTime() : mainData[mainData.length - n][0].getTime();
      for (const g of graphs) g.updateOptions({ dateWindow: [from, lastTime] });
    };
    zoom.append(el('span', { class: 'muted' }, 'Show:'),
      el('button', { type: 'button', class: 'quiet', onclick: range(27) }, 'last 26 periods'),
      el('button', { type: 'button', class: 'quiet', onclick: range(53) }, 'last 52'),
      el('button', { type: 'button', class: 'quiet', id: 'zoom-all', onclick: range(0) }, 'everything kept'),
      el('span', { class: 'muted' }, '(or drag across a chart to zoom; double-click to undo)'));
  }

  function answerBox() {
    return el('div', { 'aria-live': 'polite', class: 'answer-slot' });
  }

  function showAnswer(slot, ok, text) {
    slot.replaceChildren(el('p', { class: ok ? 'answer' : 'answer failed', role: ok ? 'status' : 'alert' }, text));
  }

  function whoField(id) {
    if (namesRecorded()) return null;
    return el('div', { class: 'form-row' }, el('label', { for: id }, 'Your name (kept in the history)'),
      el('input', { id, type: 'text', autocomplete: 'name', maxlength: '200', required: true }));
  }

  function readOnlyNote() {
    if (canWork()) return null;
    const a = state.access;
    if (a && a.you) return el('p', { class: 'answer failed' }, 'Your token has the role ' + a.you.role + '; working alerts and resets need planner or operator. The service will refuse.');
    return el('p', { class: 'answer failed' }, 'Read-only: the service needs a token for actions. Use \u201cEnter token\u201d at the top; without one the service refuses.');
  }

  async function send(path, body, slot, describe, after) {
    try {
      const answer = await api(path, { method: 'POST', body });
      const text = describe(answer);
      state.flash = text;
      showAnswer(slot, true, text);
      after();
    } catch (err) {
      showAnswer(slot, false, describeError(err));
    }
  }

  function alertActions(alert, key, reload) {
    const box = el('div', { class: 'alert-item', 'data-alert': String(alert.id) });
    const formSlot = el('div', {});
    const slot = answerBox();
    const open = (action) => () => {
      const id = 'a' + alert.id + '-' + action;
      const note = el('textarea', { id: id + '-note', rows: '2', maxlength: '4096' });
      const who = whoField(id + '-who');
      const until = action === 'snooze' ? el('input', { id: id + '-until', type: 'text', required: true, placeholder: 'a period such as ' + (alert.opened_period || '2026-12-07') + ' or 2026-12-31T09:00:00Z' }) : null;
      const preview = el('p', { class: 'preview', role: 'status' });
      const describe = () => {
        const you = state.access && state.access.you;
        const name = who ? who.querySelector('input').value.trim() || '(your name)'
          : you && you.name ? you.name : 'the person whose token you give';
        const verb = { acknowledge: 'Acknowledge', snooze: 'Snooze', resolve: 'Resolve' }[action];
        let text = verb + ' alert #' + alert.id + ' (' + alert.rule + ', ' + alert.severity + ') as ' + name;
        if (action === 'snooze') text += ' until ' + ((until && until.value.trim()) || '\u2026') + '; it opens again then if the rule still holds';
        if (action === 'resolve') text += '; a rule that still holds opens a new alert';
        preview.textContent = text + '.';
      };
      const form = el('form', { class: 'action-form', 'aria-label': action + ' alert ' + alert.id },
        who, until ? el('div', { class: 'form-row' }, el('label', { for: id + '-until' }, 'Until (a period of the series or an ISO 8601 time)'), until) : null,
        el('div', { class: 'form-row' }, el('label', { for: id + '-note' }, 'Note'), note),
        preview,
        el('div', { class: 'inline' }, el('button', { type: 'submit', id: id + '-send' }, 'Send'),
          el('button', { type: 'button', class: 'quiet', onclick: () => formSlot.replaceChildren() }, 'Cancel')));
      form.addEventListener('input', describe);
      describe();
      form.addEventListener('submit', (ev) => {
        ev.preventDefault();
        const body = { note: note.value };
        if (who) body.by = who.querySelector('input').value.trim();
        if (until) body.until = until.value.trim();
        send('v1/alerts/' + alert.id + '/' + action, body, slot,
          (a) => 'Alert #' + a.id + ' is now ' + a.state + (a.acknowledged_by ? ' (by ' + a.acknowledged_by + ')' : '') +
            (a.resolved_by ? ' (by ' + a.resolved_by + ')' : '') + (a.snoozed_until_period ? ' until ' + a.snoozed_until_period : '') +
            (a.snoozed_until ? ' until ' + a.snoozed_until : '') + '.',
          reload);
      });
      formSlot.replaceChildren(form);
      (who ? who.querySelector('input') : until || note).focus();
    };
    box.append(el('div', {}, sevTag(alert.severity, alert.rule + ' #' + alert.id), el('span', { class: 'tag st-mute', 'data-state': alert.state }, alert.state),
      el('span', { class: 'muted' }, ' since ' + alert.opened_period + (alert.value !== null ? ', signal ' + fmt(alert.value) + ' against ' + fmt(alert.limit) : ''))),
    el('div', { class: 'inline' },
      alert.state !== 'acknowledged' ? el('button', { type: 'button', class: 'quiet', id: 'act-ack-' + alert.id, onclick: open('acknowledge') }, 'Acknowledge\u2026') : null,
      el('button', { type: 'button', class: 'quiet', id: 'act-snooze-' + alert.id, onclick: open('snooze') }, 'Snooze\u2026'),
      el('button', { type: 'button', class: 'quiet', id: 'act-resolve-' + alert.id, onclick: open('resolve') }, 'Resolve\u2026')),
    formSlot, slot);
    return box;
  }

  function resetPanel(key, detail, rows, reload, details) {
    const observed = rows.filter((r) => !r.filled && r.actual !== null);
    // the newest unresolved alert with a diagnosis offers its level since the change
    const diagnosed = (details || []).find((a) => a.state !== 'resolved' && a.diagnosis);
    const slot = answerBox();
    const radios = el('fieldset', { class: 'inline' }, el('legend', {}, 'New level'));
    const choice = (value, text, checked) => {
      const id = 'reset-to-' + value;
      radios.append(el('span', {}, el('input', { type: 'radio', name: 'reset-to', id, value, checked }), ' ', el('label', { for: id }, text)));
    };
    choice('last', 'the last actual', true);
    choice('mean', 'the mean of the last k actuals', false);
    choice('value', 'a value', false);
    if (diagnosed) choice('change', 'the level since the change (alert #' + diagnosed.id + ')', false);
    const k = el('input', { id: 'reset-k', type: 'number', min: '1', max: '100000', step: '1', value: '4' });
    const value = el('input', { id: 'reset-value', type: 'number', step: 'any' });
    const note = el('textarea', { id: 'reset-note', rows: '2', maxlength: '4096' });
    const who = whoField('reset-who');
    const preview = el('p', { class: 'preview', id: 'reset-preview', role: 'status' });
    const level = () => {
      const to = radios.querySelector('input:checked').value;
      if (to === 'last') return observed.length ? observed[observed.length - 1].actual : null;
      if (to === 'change') return diagnosed.diagnosis.level;
      if (to === 'mean') {
        const n = Math.floor(Number(k.value));
        if (!(n >= 1)) return null;
        const take = observed.slice(-n);
        return take.length ? take.reduce((s, r) => s + r.actual, 0) / take.length : null;
      }
      return value.value.trim() === '' ? null : Number(value.value);
    };
    const form = el('form', { id: 'reset-form', 'aria-label': 'Reset the forecast' }, radios,
      el('div', { class: 'inline' }, el('label', { for: 'reset-k' }, 'k'), k, el('label', { for: 'reset-value' }, 'value'), value),
      who, el('div', { class: 'form-row' }, el('label', { for: 'reset-note' }, 'Note (why)'), note), preview,
      el('button', { type: 'submit', id: 'reset-send' }, 'Send reset'));
    const describe = () => {
      const l = level();
      preview.textContent = l === null || !isFinite(l) ? 'Choose a level.'
        : 'The level becomes ' + fmt(l, 3) + ' (the next forecast is now ' + fmt(detail.forecast, 3) + '). Error statistics start again and the series\u2019 unresolved alerts are resolved.';
    };
    form.addEventListener('input', describe);
    form.addEventListener('change', describe);
    describe();
    form.addEventListener('submit', (ev) => {
      ev.preventDefault();
      const to = radios.querySelector('input:checked').value;
      const body = { to, note: note.value };
      if (to === 'mean') body.k = Math.floor(Number(k.value));
      if (to === 'value') body.value = Number(value.value);
      if (to === 'change') body.alert = diagnosed.id;
      if (who) body.who = who.querySelector('input').value.trim();
      send('v1/series/' + encodeURIComponent(key) + '/reset', body, slot,
        (a) => 'Re-levelled to ' + fmt(a.reset.level, 3) + ' by ' + a.reset.who + '; the next forecast is ' + fmt(a.forecast, 3) + '.',
        reload);
    });
    return el('section', { class: 'panel', 'aria-labelledby': 'reset-title' }, el('h2', { id: 'reset-title' }, 'Reset the forecast'), form, slot);
  }

  function historyPanel(details) {
    const list = el('div', { id: 'alert-history' });
    if (!details.length) list.append(el('p', { class: 'muted' }, 'No alerts on this series yet.'));
    for (const a of details) {
      const events = el('ul', { class: 'events' });
      for (const e of a.history || []) {
        const deliveries = (e.deliveries || []).map((d) => d.sink + ': ' + d.state + (d.attempts ? ' after ' + d.attempts + ' attempt(s)' : '') + (d.last_error ? ' (' + d.last_error + ')' : '')).join('; ');
        events.append(el('li', {}, e.at + ' \u2014 ' + e.kind + (e.by ? ' by ' + e.by : '') + (e.note ? ': \u201c' + e.note + '\u201d' : '') + (deliveries ? ' [' + deliveries + ']' : '')));
      }
      const d = a.diagnosis;
      const diagnosis = d ? el('p', { class: 'diagnosis' }, el('strong', {}, 'Diagnosis: '),
        d.kind.replace('-', ' ') + ' from ' + d.change_began + '; level since ' + fmt(d.level, 3) +
        ' (' + fmt(d.level_lower, 3) + ' to ' + fmt(d.level_upper, 3) + ', before ' + fmt(d.level_before, 3) + '). Suggested: ' + d.advice + '.') : null;
      list.append(el('div', { class: 'alert-item' }, sevTag(a.severity, a.rule + ' #' + a.id), el('span', { class: 'tag st-mute' }, a.state),
        el('span', { class: 'muted' }, ' ' + a.opened_period + (a.resolved_period ? ' to ' + a.resolved_period : '') + (a.resolved_reason ? ' (' + a.resolved_reason + ')' : '')), diagnosis, events));
    }
    return el('section', { class: 'panel', 'aria-labelledby': 'history-title' }, el('h2', { id: 'history-title' }, 'Alert history'), list);
  }

  function auditPanel(audit) {
    const list = el('ul', { class: 'events', id: 'audit' });
    for (const a of audit) list.append(el('li', {}, a.at + ' \u2014 ' + a.action + ' by ' + a.who + ': ' + a.detail));
    if (!audit.length) list.append(el('li', { class: 'muted' }, 'No resets.'));
    return el('section', { class: 'panel', 'aria-labelledby': 'audit-title' }, el('h2', { id: 'audit-title' }, 'Resets'), list);
  }

  function rowTable(key, rows) {
    const head = el('tr', {}, ROW_COLUMNS.map(([k, t]) => el('th', { scope: 'col', class: k === 'period' || k === 'alerts' ? '' : 'num' }, t)));
    const body = el('tbody', {});
    for (const r of [...rows].reverse()) {
      body.append(el('tr', {}, ROW_COLUMNS.map(([k]) => {
        const v = rowValue(r, k);
        if (k === 'period') return el('td', {}, v);
        if (k === 'alerts') return el('td', {}, v);
        if (k === 'actual' && r.filled) return el('td', { class: 'num muted' }, 'filled');
        return el('td', { class: 'num' }, fmt(v, k === 'alpha' || k === 'trigg_signal' ? 3 : 2));
      })));
    }
    return el('section', { 'aria-labelledby': 'rows-title' },
      el('div', { class: 'inline' }, el('h2', { id: 'rows-title' }, 'Periods (' + rows.length + ', newest first)'),
        el('button', { type: 'button', class: 'quiet', id: 'rows-csv', onclick: () => downloadCsv(key, rows) }, 'Download CSV')),
      el('div', { class: 'table-wrap' }, el('table', { id: 'rows' }, el('caption', { class: 'visually-hidden' }, 'Every retained period'), el('thead', {}, head), body)));
  }

  // A series another instance holds (instances sharing series through Kafka): a link to it there.
  async function elsewhere(v, key) {
    let info = null;
    try {
      info = await api('v1/instances?' + new URLSearchParams({ series: key }).toString());
    } catch (err) {
      info = null;
    }
    if (!stillCurrent(v)) return;
    const owner = info && info.series && info.series.owner;
    const text = el('p', { class: 'answer', role: 'status', id: 'held-elsewhere' },
      'Another instance holds this series' + (info && info.series ? ' (partition ' + info.series.partition + ')' : '') + '. ');
    if (owner) text.append(el('a', { href: owner + '/' + seriesHref(key) }, 'Open it on ' + owner));
    v.main.append(el('h1', {}, key), text);
    v.main.dataset.ready = 'series';
  }

  // Instances sharing series: which partitions this one holds, and who holds the rest.
  async function sharingNote(v) {
    let info;
    try {
      info = await api('v1/instances');
    } catch (err) {
      return;
    }
    if (!info.sharing || !stillCurrent(v)) return;
    const note = el('p', { class: 'sub', id: 'instances' },
      'This instance holds partitions ' + (info.held.length ? info.held.join(', ') : 'none') + ' of ' + info.partitions.length + (info.ready ? '' : ' (' + info.reason + ')') + '.');
    for (const i of info.instances) {
      if (i.self || !i.url) continue;
      note.append(' ', el('a', { href: i.url + '/' }, i.url), ' holds ' + i.partitions.join(', ') + '.');
    }
    v.main.insertBefore(note, v.main.children[1] || null);
  }

  async function showSeries(key) {
    const v = newView('attention');
    const main = v.main;
    const enc = encodeURIComponent(key);
    main.append(el('p', {}, el('a', { href: '#/', id: 'back' }, '\u2190 Attention list')));
    let detail, history, alerts, policies, ahead;
    try {
      [detail, history, alerts, policies, ahead] = await Promise.all([
        api('v1/series/' + enc), api('v1/series/' + enc + '/history'),
        api('v1/alerts?' + new URLSearchParams({ series: key, limit: '50' }).toString()), loadPolicies(),
        api('v1/series/' + enc + '/forecast?horizon=' + AHEAD)]);
    } catch (err) {
      if (!stillCurrent(v)) return;
      if (err.status === 307) return elsewhere(v, key);
      main.append(el('h1', {}, key), el('p', { class: 'answer failed', role: 'alert' }, describeError(err)));
      return;
    }
    let details = [];
    try {
      details = await Promise.all(alerts.alerts.slice(0, 20).map((a) => api('v1/alerts/' + a.id)));
    } catch (err) {
      banner(describeError(err));
    }
    if (!stillCurrent(v)) return;
    banner('');
    const policy = policies.find((p) => p.name === detail.policy);
    const rows = history.rows;
    const constants = constantsText(detail.constants);
    main.append(el('h1', { class: 'key', id: 'series-key' }, detail.key),
      el('p', { class: 'sub' }, 'Policy ', el('a', { href: '#/policies' }, detail.policy), ' \u00B7 method ' + detail.method + ' \u00B7 ' + constants +
        (detail.adaptive ? ' \u00B7 adaptive alpha ' + fmt(detail.adaptive.floor, 3) + '\u2013' + fmt(detail.adaptive.cap, 3) : '') +
        (labelsText(detail.labels) ? ' \u00B7 labels ' + labelsText(detail.labels) : '')));
    if (state.flash) {
      main.append(el('p', { class: 'answer', role: 'status', id: 'flash' }, state.flash));
      state.flash = null;
    }
    main.append(el('div', { class: 'facts' },
      fact('Status', detail.status + (detail.stale ? ' (stale)' : ''), 'fact-status'),
      fact('Next forecast' + (detail.next_period ? ' for ' + detail.next_period : ''), fmt(detail.forecast), 'fact-forecast'),
      fact(Math.round(100 * detail.coverage) + ' % interval', fmt(detail.lower) + ' to ' + fmt(detail.upper)),
      fact('Trigg\u2019s signal', fmt(detail.trigg_signal, 3), 'fact-trigg'),
      fact('Cumulative signal', fmt(detail.cusum_signal), 'fact-cusum'),
      fact('MAD', fmt(detail.mad)),
      fact('Alpha in force', fmt(detail.alpha, 3)),
      fact('Rules holding', detail.alerts.length ? detail.alerts.map((a) => a.rule).join(', ') : 'none'),
      fact(AHEAD + ' periods ahead', ahead.rows.length ? fmt(ahead.rows[ahead.rows.length - 1].forecast) +
        (ahead.no_interval_because ? ' (no interval: ' + ahead.no_interval_because + ')' : '') : '\u2014', 'fact-ahead')));
    charts(main, detail, rows, alerts.alerts, policy, ahead.rows);
    const reload = () => { state.policies = null; showSeries(key); };
    const unresolved = alerts.alerts.filter((a) => a.state !== 'resolved');
    const work = el('section', { class: 'panel', 'aria-labelledby': 'work-title' }, el('h2', { id: 'work-title' }, 'Work the alerts'), readOnlyNote());
    if (!unresolved.length) work.append(el('p', { class: 'muted' }, 'No unresolved alert on this series.'));
    for (const a of unresolved) work.append(alertActions(a, key, reload));
    main.append(el('div', { class: 'panels' }, work, resetPanel(key, detail, rows, reload, details)));
    main.append(rowTable(key, rows));
    main.append(el('div', { class: 'panels' }, historyPanel(details), auditPanel(detail.audit || [])));
    main.dataset.ready = 'series';
  }

  // ---- policies and feeds -----------------------------------------------------------------

  async function showPolicies() {
    const v = newView('policies');
    const main = v.main;
    main.append(el('h1', {}, 'Policies and feeds'));
    let policies, pending, dead, attention;
    try {
      state.policies = null;
      [policies, pending, dead, attention] = await Promise.all([loadPolicies(), api('v1/deliveries?state=pending'),
        api('v1/deliveries?state=dead'), api('v1/attention?limit=1&recent=0')]);
    } catch (err) {
      failed(v, err);
      return;
    }
    if (!stillCurrent(v)) return;
    banner('');
    for (const p of policies) {
      const rules = el('tbody', {});
      for (const r of p.rules) {
        const cal = r.calibration;
        rules.append(el('tr', {}, el('th', { scope: 'row' }, r.name), el('td', {}, r.signal + (r.periods ? ' (' + r.periods + ' periods)' : '')),
          el('td', {}, r.direction), el('td', { class: 'num' }, fmt(r.limit, 3)), el('td', { class: 'num' }, fmt(r.clear, 3)),
          el('td', { class: 'num' }, String(r.persistence)), el('td', {}, sevTag(r.severity)),
          el('td', { class: 'num' }, cal ? 'one in ' + fmt(cal.false_alert_every, 0) + ' periods' : 'set by hand'),
          el('td', { class: 'num' }, cal ? fmt(cal.expected_false_alerts_per_week, 2) : '\u2014')));
      }
      const last = p.last_actual_at ? p.last_actual_at : 'none yet';
      const count = attention.counts.find((c) => c.policy === p.name) || {};
      main.append(el('section', { class: 'panel policy', 'data-policy': p.name, 'aria-labelledby': 'policy-' + p.name },
        el('h2', { id: 'policy-' + p.name }, p.name),
        el('p', { class: 'sub' }, 'Matches ' + (p.match.key || '*') + (labelsText(p.match.labels) ? ' with ' + labelsText(p.match.labels) : '') +
          ' \u00B7 ' + p.period + 'ly \u00B7 ' + p.method + ' (' + constantsText(p.constants, p.adaptive) + ') \u00B7 ' + fmt(p.series, 0) + ' series \u00B7 last actual received ' + last +
          ' \u00B7 stale after ' + p.stale_after + ' periods without one \u00B7 keeps ' + p.history + ' periods'),
        el('p', { class: 'sub' }, fmt(count.stale || 0, 0) + ' stale, ' + fmt(count.warming || 0, 0) + ' warming up, ' +
          fmt(count.alerting || 0, 0) + ' with a rule holding, ' + fmt(count.open || 0, 0) + ' open alerts'),
        el('div', { class: 'table-wrap' }, el('table', {},
          el('caption', { class: 'visually-hidden' }, 'Rules of ' + p.name),
          el('thead', {}, el('tr', {}, ['Rule', 'Signal', 'Direction', 'Limit', 'Clears at', 'Persistence', 'Severity', 'False-alert budget', 'Expected false alerts a week']
            .map((t, i) => el('th', { scope: 'col', class: i >= 3 && i !== 6 ? 'num' : '' }, t)))),
          rules))));
    }
    const slot = answerBox();
    const deliveryTable = (list, id) => {
      if (!list.length) return el('p', { class: 'muted', id }, 'None.');
      return el('div', { class: 'table-wrap' }, el('table', { id },
        el('thead', {}, el('tr', {}, ['Event', 'Alert', 'Kind', 'Sink', 'Attempts', 'Last error', 'At'].map((t) => el('th', { scope: 'col' }, t)))),
        el('tbody', {}, list.slice(0, 200).map((d) => el('tr', {}, el('td', {}, String(d.event)),
          el('td', {}, d.alert !== null ? el('a', { href: '#/alert/' + d.alert }, '#' + d.alert) : 'group ' + d.group),
          el('td', {}, d.kind), el('td', {}, d.sink), el('td', { class: 'num' }, String(d.attempts)), el('td', {}, d.last_error || ''), el('td', {}, d.at))))));
    };
    const retry = el('button', { type: 'button', id: 'retry-dead', disabled: dead.deliveries.length === 0 }, 'Retry dead deliveries');
    retry.addEventListener('click', () => send('v1/deliveries/retry', undefined, slot,
      (a) => a.requeued + ' deliveries are pending again.', () => setTimeout(showPolicies, 600)));
    main.append(el('section', { class: 'panel', 'aria-labelledby': 'deliveries-title' },
      el('h2', { id: 'deliveries-title' }, 'Deliveries'),
      el('p', { class: 'sub' }, pending.deliveries.length + ' pending, ' + dead.deliveries.length + ' dead (gave up after their retries).'),
      el('h3', {}, 'Dead'), deliveryTable(dead.deliveries, 'dead'), el('div', { class: 'inline' }, retry), slot,
      el('h3', {}, 'Pending'), deliveryTable(pending.deliveries, 'pending')));
    main.dataset.ready = 'policies';
  }

  // An alert link from a notification: opens its series.
  async function showAlert(id) {
    const v = newView('attention');
    try {
      const a = await api('v1/alerts/' + encodeURIComponent(id));
      if (!stillCurrent(v)) return;
      location.replace(seriesHref(a.series));
    } catch (err) {
      if (!stillCurrent(v)) return;
      v.main.append(el('p', { class: 'answer failed', role: 'alert' }, describeError(err)));
    }
  }

  // ---- routing ----------------------------------------------------------------------------

  function route() {
    const h = location.hash || '#/';
    document.getElementById('main').dataset.ready = '';
    if (h.startsWith('#/series/')) {
      let key;
      try {
        key = decodeURIComponent(h.slice('#/series/'.length));
      } catch (e) {
        key = h.slice('#/series/'.length);
      }
      return showSeries(key);
    }
    if (h.startsWith('#/alert/')) return showAlert(h.slice('#/alert/'.length));
    if (h.startsWith('#/policies')) return showPolicies();
    const i = h.indexOf('?');
    return showAttention(new URLSearchParams(i >= 0 ? h.slice(i + 1) : ''));
  }

  async function start() {
    document.getElementById('token-form').addEventListener('submit', useToken);
    document.getElementById('token-cancel').addEventListener('click', () => { document.getElementById('token-panel').hidden = true; });
    window.addEventListener('hashchange', () => {
      route();
      document.getElementById('main').focus({ preventScroll: true });
    });
    await refreshAccess();
    // Ask for a token once per tab when the service has tokens and this tab has none.
    if (state.access && state.access.mode !== 'open' && !state.access.you && !sessionStorage.getItem(ASKED_KEY)) {
      sessionStorage.setItem(ASKED_KEY, '1');
      openTokenPanel();
    }
    route();
  }

  start();
})();
