// The legend (categories with counts, or the colour bar) and the notes of
// the nightjar map page. h holds the page's helpers: el, count, num and
// colours (re-colour and redraw after a change of what is shown).
function njLegend(S, h) {
  const m = S.meta, box = document.getElementById('nj-legend');
  const entries = [];
  box.replaceChildren();
  if (!m.groups.length && !m.scale && !S.d.placed) {
    box.hidden = true;
    return { refresh() {} };
  }
  box.append(h.el('h2', 'nj-legend-head', m.heading || (m.scale ? 'value' : 'label')));

  function refresh() {
    for (const e of entries) {
      const off = e.idx === 'ref' ? S.hideRef : S.hidden[e.idx] === 1;
      e.li.classList.toggle('nj-off', off);
      e.button.setAttribute('aria-pressed', String(!off));
      if (e.only) e.only.setAttribute('aria-pressed', String(S.only === e.idx));
    }
  }
  function changed() { refresh(); h.colours(); }
  // entry adds a line: idx is the index into S.hidden, or 'ref' for the
  // reference rows; withOnly adds the control that isolates the group.
  function entry(list, idx, label, n, colour, withOnly) {
    const li = h.el('li');
    const button = h.el('button', 'nj-entry');
    button.type = 'button';
    button.dataset.group = String(idx);
    const sw = h.el('span', 'nj-swatch');
    sw.style.background = colour;
    button.append(sw, h.el('span', 'nj-label', label === '' ? '(empty)' : label), h.el('span', 'nj-count', h.count(n)));
    button.title = (label === '' ? '(empty)' : label) + ': ' + h.count(n) + ' rows; click to hide or show';
    button.addEventListener('click', () => {
      if (idx === 'ref') S.hideRef = !S.hideRef;
      else S.hidden[idx] ^= 1;
      S.only = -1;
      changed();
    });
    li.append(button);
    const e = { li, button, idx, only: null };
    if (withOnly) {
      const only = h.el('button', 'nj-only', 'only');
      only.type = 'button';
      only.dataset.group = String(idx);
      only.title = 'show only this group; click again to show all';
      only.addEventListener('click', () => {
        if (S.only === idx) { S.hidden.fill(0); S.only = -1; } else { S.hidden.fill(1); S.hidden[idx] = 0; S.only = idx; }
        changed();
      });
      li.append(only);
      e.only = only;
    }
    entries.push(e);
    list.append(li);
  }

  const list = h.el('ul', 'nj-groups');
  if (S.d.placed) {
    let ref = 0;
    for (let i = 0; i < S.n; i++) if (!S.d.placed[i]) ref++;
    entry(list, 'ref', 'reference rows', ref, m.reference, false);
  }
  if (m.groups.length) {
    const tools = h.el('div', 'nj-legend-tools');
    const all = h.el('button', '', 'show all'), none = h.el('button', '', 'hide all');
    all.type = none.type = 'button';
    all.addEventListener('click', () => { S.hidden.fill(0); S.hideRef = false; S.only = -1; changed(); });
    none.addEventListener('click', () => { S.hidden.fill(1); S.only = -1; changed(); });
    tools.append(all, none);
    box.append(tools);
    if (m.groups.length > m.paletteSize) {
      box.append(h.el('p', 'nj-note', h.count(m.groups.length) + ' labels, ' + m.paletteSize + ' colours: colours repeat'));
    }
    m.groups.forEach((g, k) => entry(list, k + 1, g.label, g.count, g.colour, true));
    if (m.noValue > 0) entry(list, 0, 'no value', m.noValue, m.missing, true);
  } else if (m.scale) {
    box.append(colourBar(m.scale, h));
    box.append(h.el('p', 'nj-note', m.scale.clip + ' (' + h.count(m.scale.below) + ' below, ' + h.count(m.scale.above) + ' above)'));
    if (m.scale.missing > 0) entry(list, 0, 'no value', m.scale.missing, m.missing, false);
  }
  if (m.total > m.n && m.groups.length) box.append(h.el('p', 'nj-note', 'counts are of all ' + h.count(m.total) + ' rows'));
  box.append(list);
  refresh();
  return { refresh };
}

// colourBar draws the continuous scale, high values on top, with the values
// at its ends and middle.
function colourBar(s, h) {
  const wrap = h.el('div', 'nj-bar');
  const c = document.createElement('canvas');
  c.width = 1;
  c.height = s.ramp.length;
  const ctx = c.getContext('2d');
  s.ramp.forEach((hex, k) => { ctx.fillStyle = hex; ctx.fillRect(0, s.ramp.length - 1 - k, 1, 1); });
  const ticks = h.el('div', 'nj-bar-ticks');
  ticks.append(
    h.el('span', '', (s.above > 0 ? '≥ ' : '') + h.num(s.hi)),
    h.el('span', '', h.num((s.lo + s.hi) / 2)),
    h.el('span', '', (s.below > 0 ? '≤ ' : '') + h.num(s.lo)));
  wrap.append(c, ticks);
  return wrap;
}

// njNotes writes the status line (which renderer draws what) and the notes.
function njNotes(S, h, drawn) {
  const m = S.meta, notes = document.getElementById('nj-notes');
  document.getElementById('nj-status').textContent = drawn + ' · ' + h.count(m.n) + ' points' + (m.total > m.n ? ' of ' + h.count(m.total) : '');
  for (const t of m.notes) notes.append(h.el('p', '', t));
  if (m.total > m.n) {
    notes.append(h.el('p', 'nj-warn', 'This page holds a random sample of ' + h.count(m.n) + ' of the map’s ' + h.count(m.total) +
      ' rows, every row equally likely (a page keeps at most ' + h.count(m.maxRows) + '); map.png beside it draws every row. Hover and find reach the sampled rows only.'));
  }
  if (S.r.name !== 'WebGL' && m.n > 250000) {
    notes.append(h.el('p', 'nj-warn', 'The canvas fallback blends the ' + h.count(m.n) + ' points one by one on the processor: each pan or zoom takes a moment.'));
  }
}
