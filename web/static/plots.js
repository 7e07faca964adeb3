/* railsign: draw the page's plots. Each figure is a Plotly figure built by the server and
   embedded as JSON beside its <div class="plot" data-figure="ID-data">. */
(function () {
  "use strict";
  var CONFIG = { responsive: true, displaylogo: false, modeBarButtonsToRemove: ["select2d", "lasso2d"] };

  function draw(el, figure) {
    if (!window.Plotly || !figure) { return Promise.resolve(); }
    return window.Plotly.react(el, figure.data, figure.layout, CONFIG);
  }

  function drawAll(root) {
    var nodes = (root || document).querySelectorAll(".plot[data-figure]");
    nodes.forEach(function (el) {
      var source = document.getElementById(el.getAttribute("data-figure"));
      if (!source) { return; }
      try {
        draw(el, JSON.parse(source.textContent));
      } catch (err) {
        el.textContent = "This plot could not be drawn: " + err.message;
      }
    });
  }

  window.railsignPlots = { draw: draw, drawAll: drawAll, config: CONFIG };
  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", function () { drawAll(); });
  } else {
    drawAll();
  }
})();
