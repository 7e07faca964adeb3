/* railsign: live progress of analysis jobs. Every .job-progress[data-job-id] polls the jobs
   API until its job ends, then reloads the page to show the new results. */
(function () {
  "use strict";
  var INTERVAL_MS = 700;

  function watch(box) {
    var id = box.getAttribute("data-job-id");
    var bar = box.querySelector("progress");
    var status = box.querySelector(".job-status");
    function poll() {
      fetch("/api/v1/jobs/" + encodeURIComponent(id), { credentials: "same-origin",
                                                         headers: { "Accept": "application/json" } })
        .then(function (r) { if (!r.ok) { throw new Error("HTTP " + r.status); } return r.json(); })
        .then(function (job) {
          var pct = Math.round(job.progress * 100);
          bar.value = job.progress;
          bar.textContent = pct + " %";
          status.textContent = job.state + ", " + pct + " % done";
          if (job.state === "done") {
            status.textContent = "done: loading the results";
            window.location.reload();
          } else if (job.state === "failed" || job.state === "cancelled") {
            status.textContent = job.state + (job.error ? ": " + job.error : "");
            box.classList.add("ended");
          } else {
            window.setTimeout(poll, INTERVAL_MS);
          }
        })
        .catch(function (err) {
          status.textContent = "progress unavailable (" + err.message + "); reload the page to check";
        });
    }
    poll();
  }

  document.querySelectorAll(".job-progress[data-job-id]").forEach(watch);
})();
