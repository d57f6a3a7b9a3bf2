// Every page: the collapsible site menu on narrow screens, and the corpus page's section index (closed on a
// phone, closed again after a jump). A static file: the Content-Security-Policy allows no inline script.
(function () {
  "use strict";
  var narrow = window.matchMedia("(max-width: 760px)");
  document.documentElement.classList.add("js-nav");
  document.addEventListener("DOMContentLoaded", function () {
    var toggle = document.getElementById("nav-toggle");
    var header = toggle && toggle.closest(".site-header");
    if (toggle && header) {
      toggle.addEventListener("click", function () {
        var open = header.classList.toggle("nav-open");
        toggle.setAttribute("aria-expanded", open ? "true" : "false");
      });
    }
    var index = document.querySelector(".section-index-box");
    if (index) {
      if (narrow.matches) { index.open = false; }
      index.addEventListener("click", function (event) {
        if (event.target.closest("a") && narrow.matches) { index.open = false; }
      });
    }
  });
})();
