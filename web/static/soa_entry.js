/* railsign: SOA curve entry. Pasted CSV points are drawn at once (log-log) so that a wrong
   column or a unit slip shows before saving; the server checks them again on save, and the part
   page says where the analysis reads crossing or rising curves lower (their envelope).
   Also adds empty curve slots ("Add another curve"). */
(function () {
  "use strict";
  var form = document.querySelector("form.part-form");
  if (!form) { return; }
  var preview = document.getElementById("soa-preview");
  var status = document.getElementById("preview-status");
  var slots = document.getElementById("curve-slots");
  var addButton = document.getElementById("add-curve");
  var PREFIX = { T: 1e12, G: 1e9, M: 1e6, k: 1e3, m: 1e-3, u: 1e-6, "\u00b5": 1e-6, "\u03bc": 1e-6, n: 1e-9, p: 1e-12 };
  var NUMBER = /^([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([TGMkmu\u00b5\u03bcnp]?)\s*([A-Za-z]*)$/;
  var BLUES = ["#9cc3e6", "#6fa3d4", "#4a84bf", "#2f66a3", "#1f4c80", "#15365c", "#0d2440"];

  function value(text) {
    var m = NUMBER.exec(text.trim());
    if (!m) { return NaN; }
    var scale = 1;
    if (m[2]) { scale = PREFIX[m[2]]; }
    return parseFloat(m[1]) * scale;
  }

  function pairs(text) {
    var out = [], problems = [], started = false;
    text.split(/\r?\n/).forEach(function (line, k) {
      line = line.trim();
      if (!line || line.charAt(0) === "#") { return; }
      if (!started && !/\d/.test(line)) { return; }
      started = true;
      var cells = /[,;\t]/.test(line) ? line.split(/\s*[,;\t]\s*/) : line.split(/\s+/);
      cells = cells.filter(function (c) { return c.length > 0; });
      if (cells.length !== 2) { problems.push("line " + (k + 1) + ": expected two values"); return; }
      var v = value(cells[0]), i = value(cells[1]);
      if (!(v > 0) || !(i > 0)) { problems.push("line " + (k + 1) + ": needs two positive numbers"); return; }
      out.push([v, i]);
    });
    return { points: out, problems: problems };
  }

  function draw() {
    var traces = [], problems = [], n = 0;
    slots.querySelectorAll(".curve-slot").forEach(function (slot, k) {
      var label = slot.querySelector("input").value.trim() || "DC";
      var parsed = pairs(slot.querySelector("textarea").value);
      parsed.problems.forEach(function (p) { problems.push("curve " + (k + 1) + ", " + p); });
      for (var j = 1; j < parsed.points.length; j++) {
        if (parsed.points[j][0] <= parsed.points[j - 1][0]) {
          problems.push("curve " + (k + 1) + ": V_DS must rise from point to point");
          break;
        }
      }
      for (var q = 1; q < parsed.points.length; q++) {
        if (parsed.points[q][1] > parsed.points[q - 1][1]) {
          problems.push("curve " + (k + 1) + ": I_D rises with V_DS (read lower, as the running minimum, " +
                        "once saved; the part page says where)");
          break;
        }
      }
      if (parsed.points.length) {
        n += 1;
        traces.push({ type: "scatter", mode: "lines+markers", name: "SOA " + label,
                      x: parsed.points.map(function (p) { return p[0]; }),
                      y: parsed.points.map(function (p) { return p[1]; }),
                      line: { color: BLUES[Math.min(k, BLUES.length - 1)], width: 2 }, marker: { size: 6 } });
      }
    });
    status.textContent = n === 0 ? "Paste points into a curve to see it here." :
      "Preview of " + n + " curve" + (n === 1 ? "" : "s") + (problems.length ? "; check: " + problems.join("; ") : "; no problems found") + ".";
    if (!window.Plotly) { return; }
    var axis = function (title, suffix) {
      return { title: { text: title }, type: "log", ticksuffix: suffix, tickformat: "~s", gridcolor: "#e4e8ed",
               showline: true, linecolor: "#9aa5b1", automargin: true };
    };
    window.Plotly.react(preview, traces, {
      height: 380, margin: { l: 70, r: 20, t: 20, b: 50 }, paper_bgcolor: "#fff", plot_bgcolor: "#fff",
      font: { family: "system-ui, sans-serif", size: 12, color: "#22303c" },
      xaxis: axis("Drain-source voltage V_DS", "V"), yaxis: axis("Drain current I_D", "A"),
      legend: { orientation: "h", y: -0.2 }, hovermode: "closest"
    }, (window.railsignPlots && window.railsignPlots.config) || { responsive: true, displaylogo: false });
  }

  function addSlot() {
    var all = slots.querySelectorAll(".curve-slot");
    var last = all[all.length - 1];
    var k = parseInt(last.getAttribute("data-slot"), 10) + 1;
    var copy = last.cloneNode(true);
    copy.setAttribute("data-slot", String(k));
    copy.querySelectorAll(".field-error").forEach(function (e) { e.remove(); });
    copy.querySelectorAll(".has-error").forEach(function (e) { e.classList.remove("has-error"); });
    var input = copy.querySelector("input"), area = copy.querySelector("textarea");
    var labels = copy.querySelectorAll("label");
    input.id = "f-curve-" + k + "-t-pulse"; input.name = "soa.curves[" + k + "].t_pulse"; input.value = "";
    area.id = "f-curve-" + k + "-points"; area.name = "soa.curves[" + k + "].points"; area.value = "";
    area.removeAttribute("aria-invalid"); area.removeAttribute("aria-describedby");
    var paths = copy.querySelectorAll(".path-hint");
    labels[0].htmlFor = input.id; labels[0].textContent = "MOSFET SOA curve " + (k + 1) + " pulse width";
    labels[1].htmlFor = area.id; labels[1].textContent = "MOSFET SOA curve " + (k + 1) + " points (CSV: V_DS, I_D)";
    if (paths.length === 2) { paths[0].textContent = input.name; paths[1].textContent = area.name; }
    slots.appendChild(copy);
    input.focus();
  }

  var timer = null;
  form.addEventListener("input", function (e) {
    if (!e.target.closest || !e.target.closest(".curve-slot")) { return; }
    window.clearTimeout(timer);
    timer = window.setTimeout(draw, 150);
  });
  if (addButton) { addButton.hidden = false; addButton.addEventListener("click", addSlot); }
  draw();
})();
