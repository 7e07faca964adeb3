/* railsign: helpers of the rail form. Fields that the chosen switch mode does not use are
   dimmed and say so (their values are kept and still sent); the first error gets the focus. */
(function () {
  "use strict";
  var form = document.querySelector("form.rail-form");
  if (!form) { return; }
  var mode = form.querySelector("[name='switch.mode']");

  function update() {
    var m = mode ? mode.value : "";
    form.querySelectorAll(".field[data-modes]").forEach(function (el) {
      var used = el.getAttribute("data-modes").split(" ").indexOf(m) >= 0;
      el.classList.toggle("unused", !used);
    });
  }
  if (mode) { mode.addEventListener("change", update); update(); }

  var summary = document.getElementById("error-summary");
  if (summary) { summary.focus(); }
})();
