/* railsign: sortable and filterable tables. Header buttons sort (keyboard: Enter or Space);
   the filter form above a table filters its rows as you type, and still works as a plain
   GET form without JavaScript. */
(function () {
  "use strict";

  function sortBy(table, th, button) {
    var key = button.getAttribute("data-key");
    var numeric = button.getAttribute("data-type") === "number";
    var ascending = th.getAttribute("aria-sort") !== "ascending";
    table.querySelectorAll("thead th").forEach(function (h) { h.removeAttribute("aria-sort"); });
    th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    rows.sort(function (a, b) {
      var x = a.getAttribute("data-" + key) || "", y = b.getAttribute("data-" + key) || "";
      var c;
      if (numeric) {
        var nx = x === "" ? Infinity : parseFloat(x), ny = y === "" ? Infinity : parseFloat(y);
        c = nx === ny ? 0 : (nx < ny ? -1 : 1);
      } else {
        c = x.localeCompare(y, undefined, { numeric: true, sensitivity: "base" });
      }
      return ascending ? c : -c;
    });
    rows.forEach(function (r) { body.appendChild(r); });
  }

  function filter(form, table) {
    var q = (form.elements.q && form.elements.q.value || "").toLowerCase();
    var verdict = form.elements.verdict ? form.elements.verdict.value : "";
    var mode = form.elements.mode ? form.elements.mode.value : "";
    var shown = 0, rows = table.tBodies[0].rows;
    Array.prototype.forEach.call(rows, function (r) {
      var ok = (!q || (r.getAttribute("data-name") || "").toLowerCase().indexOf(q) >= 0) &&
               (!verdict || r.getAttribute("data-verdict-word") === verdict) &&
               (!mode || r.getAttribute("data-mode") === mode);
      r.hidden = !ok;
      if (ok) { shown += 1; }
    });
    var count = document.getElementById(table.getAttribute("aria-describedby"));
    if (count) { count.textContent = "Showing " + shown + " of " + rows.length + " rails."; }
  }

  // delegated from the document, so that content put in place later (web/static/live.js) works the same
  document.addEventListener("click", function (e) {
    var button = e.target.closest && e.target.closest("table.sortable thead .sort-button");
    if (button) { sortBy(button.closest("table"), button.closest("th"), button); }
  });
  function tableOf(form) { return document.getElementById(form.getAttribute("data-filter-for")); }
  function onFilter(e) {
    var form = e.target.closest && e.target.closest("form[data-filter-for]");
    if (!form || !tableOf(form)) { return; }
    if (e.type === "submit") { e.preventDefault(); }
    filter(form, tableOf(form));
  }
  ["input", "change", "submit"].forEach(function (type) { document.addEventListener(type, onFilter); });
  function filterAll() {
    document.querySelectorAll("form[data-filter-for]").forEach(function (form) {
      if (tableOf(form)) { filter(form, tableOf(form)); }
    });
  }
  document.addEventListener("railsign:content", filterAll);
  filterAll();
})();
