// Renders every embedded figure with the locally served plotly.js, and makes tables sortable.
(function () {
  "use strict";

  function plotConfig(filename) {
    return {
      displaylogo: false,
      responsive: true,
      toImageButtonOptions: { format: "png", filename: filename, scale: 2 },
      modeBarButtonsToAdd: [{
        name: "Download plot as SVG",
        icon: window.Plotly && Plotly.Icons ? Plotly.Icons.disk : undefined,
        click: function (gd) { Plotly.downloadImage(gd, { format: "svg", filename: filename }); }
      }]
    };
  }

  function renderFigures(root) {
    if (!window.Plotly) { return; }
    (root || document).querySelectorAll("[data-figure]").forEach(function (el) {
      var source = document.getElementById(el.dataset.figure);
      if (!source) { return; }
      var fig = JSON.parse(source.textContent);
      Plotly.react(el, fig.data, fig.layout, plotConfig(el.dataset.filename || "figure"));
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
    viewControls(document);
    scrollCues();
    window.addEventListener("resize", scrollCues);
    document.querySelectorAll("table.sortable").forEach(makeSortable);
  });
})();
