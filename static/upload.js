// Upload with a progress bar: bytes sent, then the ingestion job's stages (reading, counting with its own
// progress, storing), then the corpus page as soon as the corpus exists (its models are fitted meanwhile).
// The page's CSRF token (<meta name="csrf-token">) goes with the upload as X-CSRF-Token.
(function () {
  "use strict";
  var form = document.getElementById("upload-form");
  var status = document.getElementById("upload-status");
  var bar = document.getElementById("upload-progress");
  var message = document.getElementById("upload-message");

  // value: a share done, or null for a stage without a measure of its own (the bar then shows activity,
  // not a share it does not know); the status is kept in view, a problem focused as on every form
  function show(text, value, failed) {
    var first = status.hidden;
    status.hidden = false;
    status.classList.toggle("error", !!failed);
    status.setAttribute("role", failed ? "alert" : "status");
    message.textContent = text;
    if (value === null) { bar.removeAttribute("value"); } else { bar.value = value; }
    if (first || failed) { status.scrollIntoView({ block: "nearest" }); }
    if (failed) { status.setAttribute("tabindex", "-1"); status.focus({ preventScroll: true }); }
  }

  // The stages of an upload as the job reports them (app/services/jobs.py), in words.
  var STAGES = {
    queued: "Waiting for a free worker…",
    starting: "Starting…",
    reading: "Reading the files…",
    counting: "Counting words…",
    "text-order statistics": "Measuring the text in reading order…",
    storing: "Storing the counts…",
    "exact statistics": "Computing the exact random-sample curve…"
  };

  function poll(url) {
    fetch(url).then(function (r) { return r.json(); }).then(function (job) {
      if (job.status === "done") {
        show("Stored. Opening the corpus page (models are fitted there)…", 1);
        window.location = job.corpus_url;
        return;
      }
      if (job.status === "failed") { show("Could not ingest: " + job.error, 0, true); form.querySelector("button").disabled = false; return; }
      var label = STAGES[job.stage] || "Working…";
      if (job.stage === "counting") { label += " " + Math.round(100 * job.progress) + "%"; }
      show(label, job.stage === "counting" ? job.progress : null);
      setTimeout(function () { poll(url); }, 250);
    }).catch(function () { setTimeout(function () { poll(url); }, 1000); });
  }

  form.addEventListener("submit", function (event) {
    event.preventDefault();
    var data = new FormData(form);
    var xhr = new XMLHttpRequest();
    xhr.open("POST", "/api/corpora");
    var csrf = document.querySelector('meta[name="csrf-token"]');
    if (csrf) { xhr.setRequestHeader("X-CSRF-Token", csrf.content); }
    xhr.upload.addEventListener("progress", function (e) {
      if (e.lengthComputable) { show("Sending… " + Math.round(100 * e.loaded / e.total) + "%", e.loaded / e.total); }
    });
    xhr.addEventListener("load", function () {
      var body = {};
      try { body = JSON.parse(xhr.responseText); } catch (err) { body = { detail: xhr.statusText }; }
      if (xhr.status === 202) { show(STAGES[body.stage] || "Counting words…", 0); poll(body.url); return; }
      if (xhr.status === 201) { window.location = "/corpora/" + body.id; return; }
      var detail = Array.isArray(body.detail) ? body.detail.map(function (d) { return d.msg; }).join("; ") : body.detail;
      show("Could not ingest: " + (detail || xhr.statusText), 0, true);
      form.querySelector("button").disabled = false;
    });
    xhr.addEventListener("error", function () { show("The upload was interrupted.", 0, true); form.querySelector("button").disabled = false; });
    form.querySelector("button").disabled = true;
    show("Sending…", 0);
    xhr.send(data);
  });
})();
