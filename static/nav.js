// Every page: the collapsible site menu on narrow screens, the corpus page's section index (closed on a
// phone, closed again after a jump), and the one way a form's problem is shown: the server renders it beside
// its form (role="alert", what was typed kept) and the page opens scrolled to it, with the focus on it. A static file: the Content-Security-Policy allows no inline script.
(function () {
  "use strict";
  var narrow = window.matchMedia("(max-width: 760px)");
  document.documentElement.classList.add("js-nav");
  // once the plots above it have their height, so that the problem stays in view
  window.addEventListener("load", function () {
    var problem = document.querySelector(".error-box[role=alert]");
    if (!problem) { return; }
    problem.setAttribute("tabindex", "-1");
    problem.scrollIntoView({ block: "center" });
    problem.focus({ preventScroll: true });
  });
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
