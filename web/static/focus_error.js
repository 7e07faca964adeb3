// A refused form: bring its error (marked data-focus-error) into view and give it the focus, so that
// the person reads what went wrong beside the form they sent, wherever it sits on the page.
(function () {
  "use strict";
  function show() {
    var el = document.querySelector("[data-focus-error]");
    if (!el) { return; }
    var fold = el.closest("details");
    if (fold) { fold.open = true; }
    el.scrollIntoView({block: "center"});
    el.focus({preventScroll: true});
  }
  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", show);
  } else {
    show();
  }
})();
