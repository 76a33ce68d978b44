// The review page's script, put inside index.html when the report is written
// (rxlog.review.page). Opened from disk the page is read-only; served by
// `rxlog review --serve` (rxlog.review.server) it saves labels through the server's API.
// Cards are review items (section.item: an episode, or a burst of no episode) and the
// bursts folded inside an episode (section.burst); j/k step through the items and the
// bursts of the episodes that are open.
(function () {
  const data = JSON.parse(document.getElementById('rxlog-data').textContent);
  const token = document.querySelector('meta[name="rxlog-session"]').content;
  const live = token !== '' && location.protocol.startsWith('http');
  const byKey = {};
  data.labels.forEach(function (l) { byKey[l.key] = l.label; });
  const who = document.getElementById('who');
  const mode = document.getElementById('mode');
  let cards = [];
  let current = null;

  who.value = localStorage.getItem('rxlog-who') || '';
  who.addEventListener('change', function () { localStorage.setItem('rxlog-who', who.value.trim()); });
  if (live) {
    mode.textContent = 'Labels save to the event store as you choose them.';
  } else {
    mode.textContent = 'Read-only copy: run "rxlog review --serve" to label.';
    document.querySelectorAll('.labeller button, .labeller input').forEach(function (b) { b.disabled = true; });
    who.disabled = true;
  }

  // The cards j/k step through, in page order: every item, and the bursts of open episodes.
  function navigable() {
    cards = Array.from(document.querySelectorAll('section.item, details.bursts[open] > section.burst'));
  }
  navigable();

  function eventCard(id) { return document.querySelector('section.event[data-event-id="' + CSS.escape(id) + '"]'); }
  function episodeCard(id) { return document.querySelector('section.episode[data-episode-id="' + CSS.escape(id) + '"]'); }
  function labelText(row) {
    if (!row || !row.label) return 'not labelled';
    return data.names[row.label] + (row.label_who ? ' (' + row.label_who + ')' : '') +
      (row.label_source === 'episode' ? ' — from its episode' : '');
  }
  function own(c) { return c.querySelector(':scope > h3 .current-label'); }
  function ownButtons(c) { return c.querySelectorAll(':scope > .body .labeller button'); }
  function ownNote(c) { return c.querySelector(':scope > .body .note'); }

  function showLabel(c, row) {
    own(c).textContent = labelText(row);
    c.dataset.label = row && row.label ? row.label : '';
    if (c.dataset.eventId) c.dataset.labelSource = row && row.label_source ? row.label_source : '';
    ownButtons(c).forEach(function (b) {
      b.classList.toggle('on', !!row && b.dataset.label === row.label);
    });
    const note = ownNote(c);
    if (row && row.label_note !== undefined && row.label_note !== null && document.activeElement !== note &&
        (!c.dataset.eventId || row.label_source !== 'episode')) {
      note.value = row.label_note;
    }
  }

  function showHistory(c, rows) {
    const ol = c.querySelector(':scope > .body ol.history');
    ol.textContent = '';
    rows.forEach(function (h) {
      const li = document.createElement('li');
      li.textContent = h.created_shown + ': ' + data.names[h.label] +
        (h.who ? ' by ' + h.who : '') + (h.note ? ' — ' + h.note : '');
      ol.appendChild(li);
    });
  }

  function status(c, text, bad) {
    const s = c.querySelector(':scope > .body .status');
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

  function ref(c) {
    return c.dataset.episodeId ? 'episode=' + encodeURIComponent(c.dataset.episodeId)
      : 'event=' + encodeURIComponent(c.dataset.eventId);
  }

  function loadHistory(c) {
    if (!live) return;
    api('api/history?' + ref(c))
      .then(function (j) { showHistory(c, j.history); })
      .catch(function (e) { status(c, e.message, true); });
  }

  function select(c, scroll) {
    if (!c) return;
    current = c;
    document.querySelectorAll('section.current').forEach(function (x) { x.classList.remove('current'); });
    c.classList.add('current');
    if (scroll !== false) c.scrollIntoView({block: 'start'});
    history.replaceState(null, '', '#' + c.id);
    loadHistory(c);
  }

  function step(delta) {
    navigable();
    if (!cards.length) return;
    const i = cards.indexOf(current);
    const k = i < 0 ? 0 : Math.max(0, Math.min(cards.length - 1, i + delta));
    select(cards[k]);
  }

  function toggleBursts() {
    if (!current) return;
    const ep = current.classList.contains('episode') ? current : current.closest('section.episode');
    if (!ep) return;
    const d = ep.querySelector('details.bursts');
    d.open = !d.open;
    navigable();
    if (current !== ep && !d.open) select(ep);
  }

  function save(c, label) {
    if (!live) { status(c, 'Read-only copy: run "rxlog review --serve" to label.', true); return; }
    status(c, 'saving…');
    const body = {label: label, note: ownNote(c).value, who: who.value.trim()};
    if (c.dataset.episodeId) body.episode_id = c.dataset.episodeId; else body.event_id = c.dataset.eventId;
    api('api/label', body)
      .then(function (j) {
        showLabel(c, j.episode || j.event); showHistory(c, j.history);
        (j.bursts || []).forEach(function (row) { const b = eventCard(row.event_id); if (b) showLabel(b, row); });
        // The store's time of the label, in the style of the history beneath.
        const last = j.history[j.history.length - 1];
        status(c, 'saved ' + data.names[label] + (last ? ' at ' + last.created_shown : ''));
      })
      .catch(function (e) { status(c, 'not saved: ' + e.message, true); });
  }

  document.querySelectorAll('section.item, section.burst').forEach(function (c) {
    c.addEventListener('click', function (ev) { ev.stopPropagation(); if (current !== c) select(c, false); });
    ownButtons(c).forEach(function (b) {
      b.addEventListener('click', function (ev) { ev.stopPropagation(); select(c, false); save(c, b.dataset.label); });
    });
    ownNote(c).addEventListener('keydown', function (ev) {
      if (ev.key === 'Enter') { ev.preventDefault(); this.blur(); }
    });
  });
  document.querySelectorAll('details.bursts').forEach(function (d) {
    d.addEventListener('toggle', navigable);
  });

  document.addEventListener('keydown', function (ev) {
    const t = ev.target;
    if (t && (t.tagName === 'INPUT' || t.tagName === 'TEXTAREA' || t.tagName === 'SELECT')) {
      if (ev.key === 'Escape') t.blur();
      return;
    }
    if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
    const k = ev.key;
    if (k === 'j' || k === 'ArrowDown') { step(1); }
    else if (k === 'k' || k === 'ArrowUp') { step(current ? -1 : 0); }
    else if (k === 'u') {
      navigable();
      for (let i = cards.indexOf(current) + 1; i < cards.length; i++) {
        if (!cards[i].dataset.label) { select(cards[i]); break; }
      }
    }
    else if (k === 'o') { toggleBursts(); }
    else if (k === 'n' && current) { ownNote(current).focus(); }
    else if (k === '?') { document.getElementById('keys').scrollIntoView(); }
    else if (byKey[k] && current) { save(current, byKey[k]); }
    else return;
    ev.preventDefault();
  });

  if (live) {
    api('api/events').then(function (j) {
      j.events.forEach(function (row) { const c = eventCard(row.event_id); if (c) showLabel(c, row); });
      (j.episodes || []).forEach(function (row) { const c = episodeCard(row.episode_id); if (c) showLabel(c, row); });
    }).catch(function (e) { mode.textContent = 'Could not read current labels: ' + e.message; });
  }
  const start = document.getElementById(location.hash.slice(1));
  if (start && start.matches('section.item, section.burst')) {
    const d = start.closest('details.bursts');
    if (d) { d.open = true; navigable(); }
    select(start);
  }
})();
