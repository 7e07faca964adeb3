/* railsign: the sign-off report's "Print" button (the print stylesheet does the rest). */
(function () {
  "use strict";
  var button = document.getElementById("print-report");
  if (button) {
    button.addEventListener("click", function () { window.print(); });
  }
})();
