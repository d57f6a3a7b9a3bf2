// The Texts section of the corpus page: the per-text table, growth by texts and planning in texts.
(function () {
  "use strict";
  var section = document.querySelector("[data-texts-corpus]");
  if (!section) { return; }
  var base = "/api/corpora/" + section.dataset.textsCorpus + "/texts";
  var status = document.getElementById("texts-status");
  var body = document.getElementById("texts-body");
  var rows = document.querySelector("#texts-table tbody");
  var more = document.getElementById("texts-more");
  var shown = 0, total = 0;
  var number = function (x, digits) {
    return Number(x).toLocaleString(undefined, { maximumFractionDigits: digits || 0 });
  };
  function json(url) {
    return fetch(url, { headers: { Accept: "application/json" } }).then(function (r) {
      return r.json().then(function (b) { if (!r.ok) { throw new Error(b.detail || r.statusText); } return b; });
    });
  }
  function addRows(page) {
    page.texts.forEach(function (t) {
      var tr = document.createElement("tr");
      [[number(t.position), "num"], [t.name, ""], [number(t.tokens), "num"], [number(t.types), "num"]].forEach(function (c) {
        var td = document.createElement("td");
        td.textContent = c[0];
        if (c[1]) { td.className = c[1]; }
        tr.appendChild(td);
      });
      rows.appendChild(tr);
    });
    shown += page.texts.length;
    more.hidden = shown >= total;
  }
  function band(points, color, name, dash) {
    var x = points.map(function (p) { return p.texts; });
    return [
      { x: x.concat(x.slice().reverse()), y: points.map(function (p) { return p.high; }).concat(points.map(function (p) { return p.low; }).reverse()),
        fill: "toself", fillcolor: "rgba(120,120,120,0.18)", line: { width: 0 }, mode: "lines", hoverinfo: "skip", showlegend: false, type: "scatter" },
      { x: x, y: points.map(function (p) { return p.types; }), name: name, type: "scatter", mode: "lines", line: { color: color, dash: dash },
        customdata: points.map(function (p) { return [p.low, p.high]; }),
        hovertemplate: "<b>" + name + "</b><br>%{x:,} texts: %{y:,.1f} types (range %{customdata[0]:,.0f} – %{customdata[1]:,.0f})<extra></extra>" }
    ];
  }
  function drawGrowth(g) {
    var traces = band(g.interpolation.points, "#000000", "random texts of this corpus (exact)", "solid")
      .concat(band(g.extrapolation.points, "#0072B2", "more texts of this kind (extrapolated)", "dash"));
    Plotly.react("text-growth-plot", traces, {
      margin: { l: 60, r: 10, t: 10, b: 50 }, legend: { orientation: "h", yanchor: "top", y: -0.25 }, hoverlabel: { namelength: -1 },
      xaxis: { title: { text: "texts" }, separatethousands: true }, yaxis: { title: { text: "types" }, separatethousands: true }
    }, { displaylogo: false, responsive: true });
  }
  json(base + "?rows=100").then(function (page) {
    if (!page.available) { status.textContent = page.reason; return; }
    total = page.total;
    var sep = { file: "each file is one text", paragraph: "texts separated by blank lines", line: "one text per line",
      "text column": "the texts of the word-count list's text column" }[page.separator] ||
      "texts separated by lines “" + page.separator + "”";
    document.getElementById("texts-summary").textContent = number(total) + (total === 1 ? " text" : " texts") + " (" + sep + ")" +
      (page.empty_skipped ? "; " + number(page.empty_skipped) + " empty " + (page.empty_skipped === 1 ? "text" : "texts") + " without any word skipped" : "") + ".";
    addRows(page);
    body.hidden = false;
    status.hidden = true;
    return json(base + "/growth").then(function (g) {
      drawGrowth(g);
      document.getElementById("texts-summary").textContent += " Estimated total vocabulary of texts of this kind (Chao2): " + number(g.chao2) + " types; " +
        number(g.types) + " seen so far.";
    });
  }).catch(function (err) { status.textContent = "The texts could not be read: " + err.message; });
  more.addEventListener("click", function () {
    json(base + "?rows=100&offset=" + shown).then(addRows);
  });
  var form = document.getElementById("text-plan-form");
  var answer = document.getElementById("text-plan-answer");
  form.addEventListener("submit", function (event) {
    event.preventDefault();
    json(base + "/growth?types=" + encodeURIComponent(form.elements.types.value)).then(function (g) {
      var p = g.plan;
      if (p.not_applicable) { answer.textContent = "Not applicable — " + p.not_applicable; return; }
      answer.textContent = p.more_texts === 0 ? "Already reached: the corpus holds " + number(g.types) + " types." :
        "About " + number(p.more_texts) + " more texts (" + number(p.total_texts) + " in all); between " + number(p.more_texts_low) + " and " +
        (p.more_texts_high === null ? "more than " + number(p.more_texts) + " (" + p.note + ")" : number(p.more_texts_high)) +
        " by the nominal 90% range" + (p.total_texts > 2 * g.texts ? ". Beyond twice the corpus's texts, where Chao et al. 2014 advise against extrapolating: a rough guess." : ".");
    }).catch(function (err) { answer.textContent = err.message; });
  });
})();
