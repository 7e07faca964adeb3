/* railsign: bring a form's error summary into view and give it the focus, so a refused form never looks
   as if nothing happened. */
(function () {
  "use strict";
  var summary = document.getElementById("error-summary");
  if (summary) { summary.scrollIntoView({ block: "center" }); summary.focus(); }
})();
