/* railsign: the workflow editor. The state lists of the transitions follow the state names as
   they are typed (an option's value is the state's row, so a renamed state stays picked); the
   error summary, when there is one, gets the focus. */
(function () {
  "use strict";
  var form = document.getElementById("workflow-form");
  if (!form) { return; }

  function label(row, name) {
    return name.trim() ? name.trim().replace(/\s+/g, " ") : "State " + (Number(row) + 1) + " (not named yet)";
  }
  form.querySelectorAll("input[data-state-row]").forEach(function (input) {
    input.addEventListener("input", function () {
      var row = input.getAttribute("data-state-row");
      form.querySelectorAll("select.state-pick option[value='" + row + "']").forEach(function (option) {
        option.textContent = label(row, input.value);
      });
    });
  });

  var summary = document.getElementById("error-summary");
  if (summary) { summary.focus(); }
})();
