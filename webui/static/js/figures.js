/* Draws the figures of a page: each <script type="application/json" data-figure="ID"> (a run's
   panels) or data-explore-figure="ID" (the pages that look across the collection) holds a plotly
   figure built by the server; it is drawn into the element with that id.  On the explore pages,
   clicking a point or a curve opens its run or specimen page (addresses on this server only).
   No inline scripts anywhere (the content security policy allows scripts from this server only). */
(function () {
  "use strict";

  var KINDS = [
    { attribute: "data-figure", follows: false,
      missing: "The plotting library did not load; the data are still available as CSV below." },
    { attribute: "data-explore-figure", follows: true,
      missing: "The plotting library did not load; the table on this page holds the same values." }
  ];

  function localAddress(value) {
    return typeof value === "string" && value.charAt(0) === "/" && value.charAt(1) !== "/" ? value : null;
  }

  function follow(event) {
    var p = event && event.points && event.points[0];
    if (!p) { return; }
    var href = localAddress(p.customdata) || localAddress(p.data && p.data.meta);
    if (href) { window.location.assign(href); }
  }

  function drawOne(block, kind) {
    var target = document.getElementById(block.getAttribute(kind.attribute));
    if (!target) { return; }
    if (typeof window.Plotly === "undefined") {
      target.textContent = kind.missing;
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
      if (kind.follows) { target.on("plotly_click", follow); }
      target.setAttribute("data-drawn", "yes");
    });
  }

  function draw() {
    KINDS.forEach(function (kind) {
      document.querySelectorAll('script[type="application/json"][' + kind.attribute + ']')
        .forEach(function (block) { drawOne(block, kind); });
    });
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", draw);
  } else {
    draw();
  }
})();
