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

  window.Lexigrowth = { renderFigures: renderFigures };
  document.addEventListener("DOMContentLoaded", function () {
    renderFigures(document);
    document.querySelectorAll("table.sortable").forEach(makeSortable);
  });
})();
