// Renders every embedded figure with the locally served plotly.js (when it scrolls into view), offers each as
// SVG and PNG, and makes tables sortable.
(function () {
  "use strict";

  // Saved plots are named after the page (the corpus, or the corpora compared) and the plot.
  function downloadName(el) {
    var h1 = document.querySelector("h1");
    var page = h1 ? (h1.dataset.downloadName || h1.textContent) : "";
    var stem = (page + " " + (el.dataset.filename || "figure")).toLowerCase();
    return stem.replace(/[^\p{L}\p{N}]+/gu, "-").replace(/^-+|-+$/g, "").slice(0, 120) || "figure";
  }

  function plotConfig(el) {
    var filename = downloadName(el);
    return {
      displaylogo: false,
      responsive: true,
      toImageButtonOptions: { format: "png", filename: filename, scale: 2 },
      modeBarButtonsToAdd: [{
        name: "Download plot as SVG",
        icon: Plotly.Icons.disk,
        click: function (gd) { Plotly.downloadImage(gd, { format: "svg", filename: filename }); }
      }]
    };
  }

  // Each plot is drawn once (a promise kept on its element), with its figure from the JSON beside it.
  function draw(el) {
    if (!el.lexigrowthDrawn) {
      var fig = JSON.parse(document.getElementById(el.dataset.figure).textContent);
      el.lexigrowthDrawn = Plotly.react(el, fig.data, fig.layout, plotConfig(el));
    }
    return el.lexigrowthDrawn;
  }

  // Plots in or near the window are drawn at once; the others when they scroll into view (their box keeps its
  // height meanwhile, so the page does not jump).
  var nearView = "200% 0px";  // within two window heights below: drawn with the first view
  var observer = window.IntersectionObserver ? new IntersectionObserver(function (entries) {
    entries.forEach(function (entry) {
      if (entry.isIntersecting) { observer.unobserve(entry.target); draw(entry.target); }
    });
  }, { rootMargin: nearView }) : null;

  function renderFigures(root) {
    if (!window.Plotly) { return; }
    (root || document).querySelectorAll("[data-figure]").forEach(function (el) {
      if (!document.getElementById(el.dataset.figure)) { return; }
      if (observer) { observer.observe(el); } else { draw(el); }
    });
  }

  // The "SVG" and "PNG" buttons under each plot (the toolbar has both too, but shows only on hover).
  function downloadButtons() {
    document.querySelectorAll("[data-download-format]").forEach(function (button) {
      button.addEventListener("click", function () {
        var el = document.getElementById(button.dataset.plot);
        if (!window.Plotly || !el) { return; }
        draw(el).then(function () {
          var options = { format: button.dataset.downloadFormat, filename: downloadName(el) };
          if (options.format === "png") { options.scale = 2; }
          Plotly.downloadImage(el, options);
        });
      });
    });
  }

  function cellValue(cell) {
    var text = cell.textContent.trim();
    var number = parseFloat(text.replace(/[,%±\s]/g, ""));
    return isNaN(number) || !cell.classList.contains("num") ? text.toLowerCase() : number;
  }

  function makeSortable(table) {
    table.querySelectorAll("thead th").forEach(function (th, column) {
      var ascending = true;
      th.addEventListener("click", function () {
        var body = table.tBodies[0];
        var rows = Array.prototype.slice.call(body.rows);
        rows.sort(function (a, b) {
          var x = cellValue(a.cells[column]), y = cellValue(b.cells[column]);
          return (x < y ? -1 : x > y ? 1 : 0) * (ascending ? 1 : -1);
        });
        ascending = !ascending;
        rows.forEach(function (row) { body.appendChild(row); });
      });
    });
  }

  // A plot's named views (layout.meta.views, e.g. log/linear, observed range/extrapolation) chosen by radios.
  function viewControls(root) {
    (root || document).querySelectorAll(".plot-views[data-plot]").forEach(function (group) {
      var el = document.getElementById(group.dataset.plot);
      group.addEventListener("change", function (event) {
        var views = el && el.layout && el.layout.meta && el.layout.meta.views;
        if (window.Plotly && views && views[event.target.value]) {
          // a copy: plotly.js must not be handed an object that lives inside its own layout
          Plotly.relayout(el, JSON.parse(JSON.stringify(views[event.target.value])));
        }
      });
    });
  }

  // Tables wider than their box: show the "scroll sideways" cue only when they really overflow.
  function scrollCues() {
    document.querySelectorAll(".scroll-box").forEach(function (box) {
      var inner = box.querySelector(".scroll");
      box.classList.toggle("overflowing", !!inner && inner.scrollWidth > inner.clientWidth + 1);
    });
  }

  window.Lexigrowth = { renderFigures: renderFigures };
  document.addEventListener("DOMContentLoaded", function () {
    renderFigures(document);
    downloadButtons();
    viewControls(document);
    scrollCues();
    window.addEventListener("resize", scrollCues);
    document.querySelectorAll("table.sortable").forEach(makeSortable);
  });
})();
