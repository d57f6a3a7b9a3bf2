// "Draw a random sample": fetch a real random sample's spectrum and plot it over the exact prediction.
(function () {
  "use strict";
  var form = document.getElementById("sample-form");
  if (!form) { return; }
  var out = document.getElementById("sample-result");
  var draws = 0;
  form.addEventListener("submit", function (event) {
    event.preventDefault();
    var tokens = form.elements.tokens.value;
    draws += 1;
    fetch("/api/corpora/" + form.dataset.corpus + "/sample?tokens=" + encodeURIComponent(tokens) + "&random_state=" + draws)
      .then(function (r) { return r.json().then(function (body) { return { ok: r.ok, body: body }; }); })
      .then(function (res) {
        if (!res.ok) { out.textContent = res.body.detail; return; }
        var s = res.body, ks = s.observed.map(function (_, i) { return i + 1; });
        out.textContent = "Sample " + draws + ": " + s.types.toLocaleString() + " types observed, " +
          Math.round(s.expected_types).toLocaleString() + " expected for " + Number(s.tokens).toLocaleString() + " tokens.";
        Plotly.react("sample-plot", [
          { type: "bar", x: ks, y: s.observed, name: "this sample (observed)", marker: { color: "#b9c6d4" },
            hovertemplate: "<b>this sample</b><br>%{y:,} types occur exactly %{x} times<extra></extra>" },
          { type: "scatter", mode: "lines+markers", x: ks, y: s.expected, name: "prediction (exact)", line: { color: "#000000", dash: "dash" },
            hovertemplate: "<b>exact prediction</b><br>%{y:,.1f} types expected to occur %{x} times<extra></extra>" }
        ], {
          margin: { l: 60, r: 10, t: 10, b: 50 }, legend: { orientation: "h", yanchor: "top", y: -0.25 }, hoverlabel: { namelength: -1 },
          xaxis: { title: { text: "m (occurrences per type)" }, dtick: 1 }, yaxis: { title: { text: "types (V_m)" }, separatethousands: true }
        }, { displaylogo: false, responsive: true });
      });
  });
})();
