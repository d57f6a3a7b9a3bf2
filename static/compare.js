// Library: pick 2 to 8 corpora to compare, filter by label on change. Comparison page: copy the permalink,
// switch the growth axis.
(function () {
  "use strict";
  var MIN = 2, MAX = 8;

  function librarySelection(form) {
    var button = form.querySelector("#compare-button");
    var status = form.querySelector("#compare-count");
    function update() {
      var n = form.querySelectorAll("input[name=corpus]:checked").length;
      button.disabled = n < MIN || n > MAX;
      status.textContent = n + " selected" + (n > MAX ? " (at most " + MAX + ")" : n < MIN ? " (choose at least " + MIN + ")" : "");
    }
    form.addEventListener("change", update);
    update();
  }

  function copyLink(button) {
    var input = document.getElementById(button.dataset.copy);
    var status = document.getElementById("copy-status");
    button.addEventListener("click", function () {
      function done(text) { if (status) { status.textContent = text; } }
      if (navigator.clipboard && window.isSecureContext) {
        navigator.clipboard.writeText(input.value).then(function () { done("Copied."); },
          function () { input.select(); done("Press Ctrl+C to copy."); });
      } else {
        input.select();
        done(document.execCommand && document.execCommand("copy") ? "Copied." : "Press Ctrl+C to copy.");
      }
    });
  }

  function growthScale(radios) {
    radios.forEach(function (radio) {
      radio.addEventListener("change", function () {
        document.querySelectorAll("[data-scale]").forEach(function (box) {
          box.hidden = box.dataset.scale !== radio.value;
          var plotArea = box.querySelector(".plot-area");
          if (!box.hidden && plotArea && window.Plotly && plotArea.data) { Plotly.Plots.resize(plotArea); }
        });
        var url = new URL(window.location.href);
        if (radio.value === "share") { url.searchParams.set("scale", "share"); } else { url.searchParams.delete("scale"); }
        window.history.replaceState(null, "", url.toString());
      });
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    var form = document.getElementById("compare-form");
    if (form) { librarySelection(form); }
    var copy = document.getElementById("copy-link");
    if (copy) { copyLink(copy); }
    var radios = document.querySelectorAll("input[name=growth-scale]");
    if (radios.length) { growthScale(radios); }
  });
})();
