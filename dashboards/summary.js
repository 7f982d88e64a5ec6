/* sweeper summary: records errors into the page, draws the figures, sorts tables. */
(function () {
  "use strict";
  var status = document.getElementById("sweeper-status");

  function noteError(message) {
    status.dataset.errors = String(Number(status.dataset.errors) + 1);
    var item = document.createElement("li");
    item.textContent = String(message);
    status.querySelector("ol").appendChild(item);
  }

  window.addEventListener("error", function (event) {
    noteError(event.message || "a resource failed to load");
  }, true);
  window.addEventListener("unhandledrejection", function (event) {
    noteError("unhandled rejection: " + event.reason);
  });
  document.addEventListener("securitypolicyviolation", function (event) {
    noteError("blocked by the page's policy: " + event.violatedDirective + " " + event.blockedURI);
  });
  var originalError = console.error;
  console.error = function () {
    noteError(Array.prototype.join.call(arguments, " "));
    originalError.apply(console, arguments);
  };

  // No toolbar over the figures: zoom by dragging, double-click to reset. Nothing on the page
  // can send data anywhere; the summary stays on this machine.
  var OPTIONS = { displayModeBar: false, displaylogo: false, responsive: true,
    showSendToCloud: false, scrollZoom: false };

  function draw(figures, id) {
    var target = document.getElementById(id);
    Plotly.newPlot(target, figures[id].data, figures[id].layout, OPTIONS).then(function () {
      status.dataset.figuresRendered = String(Number(status.dataset.figuresRendered) + 1);
      status.dataset.figuresFolded = String(Number(status.dataset.figuresFolded) - 1);
    }, noteError);
  }

  function drawFigures() {
    var figures = JSON.parse(document.getElementById("sweeper-figures").textContent);
    var ids = Object.keys(figures);
    status.dataset.figuresFolded = String(ids.length);
    ids.forEach(function (id) {
      var target = document.getElementById(id);
      if (!target) {
        noteError("no place for figure " + id);
        return;
      }
      // A figure inside a folded part is drawn when it is opened: folded, it has no width.
      var fold = target.closest("details:not([open])");
      if (!fold) {
        draw(figures, id);
        return;
      }
      fold.addEventListener("toggle", function once() {
        if (!fold.open) return;
        fold.removeEventListener("toggle", once);
        draw(figures, id);
      });
    });
  }

  function sortKey(row, column) {
    var cell = row.cells[column];
    var raw = cell.hasAttribute("data-sort") ? cell.getAttribute("data-sort") : cell.textContent;
    var number = Number(raw);
    return raw !== "" && !isNaN(number) ? number : raw.toLowerCase();
  }

  function compare(a, b) {
    if (typeof a !== typeof b) return typeof a === "number" ? -1 : 1;
    return a < b ? -1 : a > b ? 1 : 0;
  }

  function makeSortable(table) {
    var body = table.tBodies[0];
    var headings = table.tHead.rows[0].cells;
    Array.prototype.forEach.call(headings, function (heading, column) {
      function sort() {
        var down = heading.getAttribute("aria-sort") === "ascending";
        Array.prototype.forEach.call(headings, function (h) { h.removeAttribute("aria-sort"); });
        heading.setAttribute("aria-sort", down ? "descending" : "ascending");
        var rows = Array.prototype.slice.call(body.rows);
        rows.sort(function (a, b) { return compare(sortKey(a, column), sortKey(b, column)) * (down ? -1 : 1); });
        var fragment = document.createDocumentFragment();
        rows.forEach(function (row) { fragment.appendChild(row); });
        body.appendChild(fragment);
      }
      heading.addEventListener("click", sort);
      heading.addEventListener("keydown", function (event) {
        if (event.key === "Enter" || event.key === " ") { event.preventDefault(); sort(); }
      });
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    document.querySelectorAll("table.sortable").forEach(makeSortable);
    if (typeof Plotly === "undefined") {
      noteError("the plotting library did not load");
      return;
    }
    drawFigures();
  });
})();
