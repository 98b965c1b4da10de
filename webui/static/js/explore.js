/* The pages that look across the collection (overlay, shifts, map, coupled); their figures are
   drawn by figures.js.
   - Makes tables with data-sortable sortable by their column buttons.
   - Colours the small swatches of marker tables (set through the DOM, so no inline styles).
   No inline scripts anywhere (the content security policy allows scripts from this server only). */
(function () {
  "use strict";

  function cellValue(row, index) {
    var cell = row.cells[index];
    if (!cell) { return ""; }
    var raw = cell.getAttribute("data-value");
    if (raw === null) { return cell.textContent.trim().toLowerCase(); }
    if (raw === "") { return null; }
    var number = Number(raw);
    return isNaN(number) ? raw.toLowerCase() : number;
  }

  function sortable(table) {
    var heads = table.tHead ? table.tHead.rows[0].cells : [];
    Array.prototype.forEach.call(heads, function (th, index) {
      var button = th.querySelector("button[data-sort]");
      if (!button) { return; }
      button.addEventListener("click", function () {
        var ascending = th.getAttribute("aria-sort") !== "ascending";
        Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("aria-sort"); });
        th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
        var body = table.tBodies[0];
        var rows = Array.prototype.slice.call(body.rows);
        rows.sort(function (a, b) {
          var x = cellValue(a, index), y = cellValue(b, index);
          // Rows without a value go last in either direction.
          if (x === null && y === null) { return 0; }
          if (x === null) { return 1; }
          if (y === null) { return -1; }
          var order = x < y ? -1 : (x > y ? 1 : 0);
          return ascending ? order : -order;
        });
        rows.forEach(function (r) { body.appendChild(r); });
      });
    });
  }

  function swatches() {
    document.querySelectorAll(".swatch[data-colour]").forEach(function (el) {
      var colour = el.getAttribute("data-colour");
      if (/^(#[0-9a-fA-F]{3,8}|rgba?\([0-9., ]+\))$/.test(colour)) { el.style.backgroundColor = colour; }
    });
  }

  function start() {
    document.querySelectorAll("table[data-sortable]").forEach(sortable);
    swatches();
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", start);
  } else {
    start();
  }
})();
