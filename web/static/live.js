/* railsign: the open rail or board page follows its data. The page names its event stream and the
   digest it was drawn with (<div id="live" data-events="..." data-version="...">). Each "state" event
   brings the current digest and the active jobs: their progress bars move in place, and when the
   digest differs the page's content is fetched again and put in place of the old, without a reload
   (left alone while a field of it is being edited: a notice offers the reload instead). When the
   stream breaks, the same URL is polled for its JSON state until the stream is back. */
(function () {
  "use strict";
  var POLL_MS = 1000, REOPEN_MS = 15000;
  var box = document.getElementById("live");
  if (!box) { return; }
  var url = box.getAttribute("data-events");
  var version = box.getAttribute("data-version");
  var latest = version, refreshing = false, source = null, pollTimer = null, reopenTimer = null;

  function progress(jobs) {
    (jobs || []).forEach(function (job) {
      var el = document.querySelector('.job-progress[data-job-id="' + job.id + '"]');
      if (!el) { return; }
      var bar = el.querySelector("progress"), status = el.querySelector(".job-status");
      var pct = Math.round(job.progress * 100);
      if (bar) { bar.value = job.progress; bar.textContent = pct + " %"; }
      if (status) { status.textContent = job.state + ", " + pct + " % done"; }
    });
  }

  function editing(content) {
    var a = document.activeElement;
    return !!(a && a.form && content.contains(a) &&
              (a.tagName === "TEXTAREA" || a.tagName === "SELECT" ||
               (a.tagName === "INPUT" && !/^(submit|button|hidden)$/.test(a.type))));
  }

  function notice(content) {
    if (document.getElementById("live-notice")) { return; }
    var p = document.createElement("p");
    p.id = "live-notice"; p.className = "notice"; p.setAttribute("role", "status");
    p.innerHTML = 'This page has changed since it was opened. <a href="">Reload it</a> to see the new state.';
    content.insertBefore(p, content.firstChild);
  }

  function refresh() {
    if (refreshing) { return; }
    refreshing = true;
    fetch(window.location.href, { credentials: "same-origin", headers: { "Accept": "text/html" } })
      .then(function (r) { if (!r.ok) { throw new Error("HTTP " + r.status); } return r.text(); })
      .then(function (html) {
        var doc = new DOMParser().parseFromString(html, "text/html");
        var fresh = doc.getElementById("content"), here = document.getElementById("content");
        var freshLive = doc.getElementById("live");
        if (!fresh || !here || !freshLive) { return; }
        if (editing(here)) { notice(here); return; }
        var open = {};
        here.querySelectorAll("details[id]").forEach(function (d) { open[d.id] = d.open; });
        var node = document.importNode(fresh, true);
        node.querySelectorAll("details[id]").forEach(function (d) { if (d.id in open) { d.open = open[d.id]; } });
        if (window.Plotly) { here.querySelectorAll(".js-plotly-plot").forEach(function (el) { window.Plotly.purge(el); }); }
        here.replaceWith(node);
        box = document.getElementById("live");
        version = box.getAttribute("data-version");
        document.dispatchEvent(new CustomEvent("railsign:content", { detail: { root: node } }));
        // the new content is painted first (verdicts, tables), the plots drawn after it
        window.requestAnimationFrame(function () {
          window.setTimeout(function () { if (window.railsignPlots) { window.railsignPlots.drawAll(node); } }, 0);
        });
      })
      .catch(function () { /* the next state event or poll tries again */ })
      .then(function () {
        refreshing = false;
        if (latest !== version) { window.setTimeout(refresh, 50); }
      });
  }

  function onState(state) {
    latest = state.version;
    progress(state.jobs);
    if (state.version !== version) { refresh(); }
  }

  function poll() {
    pollTimer = null;
    fetch(url, { credentials: "same-origin", headers: { "Accept": "application/json" } })
      .then(function (r) { if (!r.ok) { throw new Error("HTTP " + r.status); } return r.json(); })
      .then(onState)
      .catch(function () { /* keep trying */ })
      .then(function () { if (!source || source.readyState !== 1) { pollTimer = window.setTimeout(poll, POLL_MS); } });
  }

  function startPolling() {
    if (pollTimer === null) { pollTimer = window.setTimeout(poll, POLL_MS); }
  }

  function open() {
    reopenTimer = null;
    if (!window.EventSource) { startPolling(); return; }
    source = new EventSource(url);
    source.addEventListener("state", function (e) { onState(JSON.parse(e.data)); });
    source.addEventListener("open", function () {
      if (pollTimer !== null) { window.clearTimeout(pollTimer); pollTimer = null; }
    });
    source.addEventListener("error", function () {
      startPolling();  // the browser retries the stream by itself unless it gave up (closed)
      if (source.readyState === 2 && reopenTimer === null) { reopenTimer = window.setTimeout(open, REOPEN_MS); }
    });
  }

  window.railsignLive = { refresh: refresh, state: function () { return { version: version, latest: latest }; } };
  open();
})();
