// The review page's script, put inside index.html when the report is written
// (rxlog.review.page). Opened from disk the page is read-only; served by
// `rxlog review --serve` (rxlog.review.server) it saves labels through the server's API.
(function () {
  const data = JSON.parse(document.getElementById('rxlog-data').textContent);
  const token = document.querySelector('meta[name="rxlog-session"]').content;
  const live = token !== '' && location.protocol.startsWith('http');
  const cards = Array.from(document.querySelectorAll('section.event'));
  const byKey = {};
  data.labels.forEach(function (l) { byKey[l.key] = l.label; });
  const who = document.getElementById('who');
  const mode = document.getElementById('mode');
  let cur = -1;

  who.value = localStorage.getItem('rxlog-who') || '';
  who.addEventListener('change', function () { localStorage.setItem('rxlog-who', who.value.trim()); });
  if (live) {
    mode.textContent = 'Labels save to the event store as you choose them.';
  } else {
    mode.textContent = 'Read-only copy: run "rxlog review --serve" to label.';
    document.querySelectorAll('.labeller button, .labeller input').forEach(function (b) { b.disabled = true; });
    who.disabled = true;
  }

  function card(id) { return cards.find(function (c) { return c.dataset.eventId === id; }); }

  function showLabel(c, row) {
    const text = c.querySelector('.current-label');
    text.textContent = row && row.label ? data.names[row.label] + (row.label_who ? ' (' + row.label_who + ')' : '') : 'not labelled';
    c.dataset.label = row && row.label ? row.label : '';
    c.querySelectorAll('.labeller button').forEach(function (b) {
      b.classList.toggle('on', !!row && b.dataset.label === row.label);
    });
    if (row && row.label_note !== undefined && row.label_note !== null && document.activeElement !== c.querySelector('.note')) {
      c.querySelector('.note').value = row.label_note;
    }
  }

  function showHistory(c, rows) {
    const ol = c.querySelector('ol.history');
    ol.textContent = '';
    rows.forEach(function (h) {
      const li = document.createElement('li');
      li.textContent = h.created_shown + ': ' + data.names[h.label] +
        (h.who ? ' by ' + h.who : '') + (h.note ? ' — ' + h.note : '');
      ol.appendChild(li);
    });
  }

  function status(c, text, bad) {
    const s = c.querySelector('.status');
    s.textContent = text;
    s.classList.toggle('error', !!bad);
  }

  function api(path, body) {
    const opts = body === undefined ? {} : {
      method: 'POST', body: JSON.stringify(body),
      headers: {'Content-Type': 'application/json', 'X-Rxlog-Token': token}
    };
    return fetch(path, opts).then(function (r) {
      return r.json().then(function (j) { if (!r.ok) throw new Error(j.error || r.statusText); return j; });
    });
  }

  function loadHistory(c) {
    if (!live) return;
    api('api/history?event=' + encodeURIComponent(c.dataset.eventId))
      .then(function (j) { showHistory(c, j.history); })
      .catch(function (e) { status(c, e.message, true); });
  }

  function select(i, scroll) {
    if (!cards.length) return;
    cur = Math.max(0, Math.min(cards.length - 1, i));
    cards.forEach(function (c, k) { c.classList.toggle('current', k === cur); });
    const c = cards[cur];
    if (scroll !== false) c.scrollIntoView({block: 'start'});
    history.replaceState(null, '', '#' + c.id);
    loadHistory(c);
  }

  function save(c, label) {
    if (!live) { status(c, 'Read-only copy: run "rxlog review --serve" to label.', true); return; }
    status(c, 'saving…');
    api('api/label', {event_id: c.dataset.eventId, label: label, note: c.querySelector('.note').value,
                      who: who.value.trim()})
      .then(function (j) {
        showLabel(c, j.event); showHistory(c, j.history);
        // The store's time of the label, in the style of the history beneath.
        const last = j.history[j.history.length - 1];
        status(c, 'saved ' + data.names[label] + (last ? ' at ' + last.created_shown : ''));
      })
      .catch(function (e) { status(c, 'not saved: ' + e.message, true); });
  }

  cards.forEach(function (c, k) {
    c.addEventListener('click', function () { if (cur !== k) select(k, false); });
    c.querySelectorAll('.labeller button').forEach(function (b) {
      b.addEventListener('click', function (ev) { ev.stopPropagation(); select(k, false); save(c, b.dataset.label); });
    });
    c.querySelector('.note').addEventListener('keydown', function (ev) {
      if (ev.key === 'Enter') { ev.preventDefault(); this.blur(); }
    });
  });

  document.addEventListener('keydown', function (ev) {
    const t = ev.target;
    if (t && (t.tagName === 'INPUT' || t.tagName === 'TEXTAREA' || t.tagName === 'SELECT')) {
      if (ev.key === 'Escape') t.blur();
      return;
    }
    if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
    const k = ev.key;
    if (k === 'j' || k === 'ArrowDown') { select(cur + 1); }
    else if (k === 'k' || k === 'ArrowUp') { select(cur < 0 ? 0 : cur - 1); }
    else if (k === 'u') {
      for (let i = cur + 1; i < cards.length; i++) { if (!cards[i].dataset.label) { select(i); break; } }
    }
    else if (k === 'n' && cur >= 0) { cards[cur].querySelector('.note').focus(); }
    else if (k === '?') { document.getElementById('keys').scrollIntoView(); }
    else if (byKey[k] && cur >= 0) { save(cards[cur], byKey[k]); }
    else return;
    ev.preventDefault();
  });

  if (live) {
    api('api/events').then(function (j) {
      j.events.forEach(function (row) { const c = card(row.event_id); if (c) showLabel(c, row); });
    }).catch(function (e) { mode.textContent = 'Could not read current labels: ' + e.message; });
  }
  const start = cards.findIndex(function (c) { return '#' + c.id === location.hash; });
  if (start >= 0) select(start);
})();
