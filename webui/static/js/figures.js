/* Draws the figures of a page: each <script type="application/json" data-figure="ID">
   holds a plotly figure built by the server; it is drawn into the element with that id.
   No inline scripts anywhere (the content security policy allows scripts from this server only). */
(function () {
  "use strict";

  function draw() {
    var blocks = document.querySelectorAll('script[type="application/json"][data-figure]');
    blocks.forEach(function (block) {
      var target = document.getElementById(block.getAttribute("data-figure"));
      if (!target) { return; }
      if (typeof window.Plotly === "undefined") {
        target.textContent = "The plotting library did not load; the data are still available as CSV below.";
        target.classList.add("plot-failed");
        return;
      }
      var figure;
      try {
        figure = JSON.parse(block.textContent);
      } catch (err) {
        target.textContent = "This figure could not be read.";
        target.classList.add("plot-failed");
        return;
      }
      window.Plotly.newPlot(target, figure.data, figure.layout, {
        responsive: true,
        displaylogo: false,
        modeBarButtonsToRemove: ["lasso2d", "select2d"],
        toImageButtonOptions: { format: "png", scale: 2 }
      }).then(function () {
        target.setAttribute("data-drawn", "yes");
      });
    });
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", draw);
  } else {
    draw();
  }
})();
