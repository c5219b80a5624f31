// Keyboard for the item page: 1-9 choose a sense, 0 none of these, S skip, U undo,
// A switch the shading between attention and rollout. Typing in a field is left alone.
(function () {
  "use strict";
  function typing(target) {
    var tag = target && target.tagName;
    return tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (target && target.isContentEditable);
  }
  function show(view) {
    document.querySelectorAll("[data-view-panel]").forEach(function (panel) {
      panel.hidden = panel.getAttribute("data-view-panel") !== view;
    });
    document.querySelectorAll(".toggle[data-view]").forEach(function (link) {
      link.setAttribute("aria-pressed", link.getAttribute("data-view") === view ? "true" : "false");
    });
  }
  var busy = false;
  document.addEventListener("click", function (event) {
    var link = event.target.closest && event.target.closest(".toggle[data-view]");
    if (link) { event.preventDefault(); show(link.getAttribute("data-view")); }
  });
  document.addEventListener("keydown", function (event) {
    if (busy || event.ctrlKey || event.metaKey || event.altKey || typing(event.target)) { return; }
    var key = event.key.toLowerCase();
    if (key === "a") {
      var shown = document.querySelector("[data-view-panel]:not([hidden])");
      if (shown) { show(shown.getAttribute("data-view-panel") === "attention" ? "rollout" : "attention"); }
      event.preventDefault();
      return;
    }
    var button = document.querySelector('button[data-key="' + key + '"]');
    if (!button || button.disabled) { return; }
    event.preventDefault();
    busy = true;
    button.focus();
    button.form.requestSubmit(button);
  });
})();
