// While a corpus's models are being computed, ask their JSON twin every second and reload the page once
// they are ready (or have failed, so that the page shows why).
(function () {
  "use strict";
  var notice = document.getElementById("models-pending");
  if (!notice) { return; }
  var url = notice.getAttribute("data-models-url");
  function check() {
    fetch(url, { headers: { "Accept": "application/json" } }).then(function (r) {
      if (r.status === 202) { setTimeout(check, 1000); return; }
      window.location.reload();
    }).catch(function () { setTimeout(check, 3000); });
  }
  setTimeout(check, 700);
})();
