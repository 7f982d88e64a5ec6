/* Test probe added to a summary: opens every fold, waits for the figures, then measures the
   layout and posts what it found to the frame around the page. */
document.addEventListener("DOMContentLoaded", function () {
  document.querySelectorAll("details").forEach(function (fold) { fold.open = true; });
  var status = document.getElementById("sweeper-status");
  var tries = 0;
  function measure() {
    var expected = Number(status.dataset.figuresExpected);
    if (Number(status.dataset.figuresRendered) < expected && tries++ < 150) {
      setTimeout(measure, 100);
      return;
    }
    var width = document.documentElement.clientWidth;
    var wide = [];
    document.querySelectorAll("body *").forEach(function (el) {
      // scroll boxes may hold wider content; plotly's text-measuring svg sits off screen
      if (el.closest(".table-wrap, pre, #sweeper-status, #js-plotly-tester")) return;
      var box = el.getBoundingClientRect();
      if (box.width && (box.right > width + 1 || box.left < -1)) {
        var plot = el.closest(".js-plotly-plot");
        wide.push((plot ? plot.id + " " : "") + el.tagName.toLowerCase() + (el.id ? "#" + el.id : "") + " " +
          Math.round(box.left) + ".." + Math.round(box.right));
      }
    });
    var untitled = [];
    document.querySelectorAll(".js-plotly-plot").forEach(function (plot) {
      Object.keys(plot._fullLayout).forEach(function (key) {
        var axis = plot._fullLayout[key];
        if (!/^[xy]axis\d*$/.test(key) || !axis.visible || !axis.showticklabels) return;
        var text = axis.title && axis.title.text;
        if (!text || !String(text).trim()) untitled.push(plot.id + ":" + key);
      });
    });
    var tops = {};
    document.querySelectorAll("nav.contents a").forEach(function (a) {
      tops[Math.round(a.getBoundingClientRect().top)] = true;
    });
    var errors = Array.prototype.map.call(status.querySelectorAll("li"), function (li) {
      return li.textContent;
    });
    parent.postMessage(JSON.stringify({
      measured: "yes",
      viewport: String(width),
      pageWidth: String(document.documentElement.scrollWidth),
      wide: wide.slice(0, 12).join(" | "),
      untitled: untitled.join(" "),
      toolbars: String(document.querySelectorAll(".modebar-btn").length),
      navRows: String(Object.keys(tops).length),
      errors: status.dataset.errors,
      errorList: errors.join(" | "),
      figuresExpected: status.dataset.figuresExpected,
      figuresRendered: status.dataset.figuresRendered,
      height: String(Math.ceil(document.body.getBoundingClientRect().bottom))
    }), "*");
  }
  setTimeout(measure, 50);
});
