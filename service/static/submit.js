// After a refused submission: move keyboard focus to the list of problems so that a screen
// reader announces it, and scroll each text area to its first flagged line so that the problem
// and its place are in view together.
"use strict";
(function () {
  for (const list of document.querySelectorAll(".problems[data-field]")) {
    const area = document.getElementById(`${list.dataset.field}_text`);
    const first = list.querySelector("li[data-line]");
    if (!area || !first) continue;
    const line = Number(first.dataset.line);
    const height = parseFloat(getComputedStyle(area).lineHeight) || 18;
    area.scrollTop = Math.max(0, (line - 3) * height);
  }
  const summary = document.getElementById("problem-summary");
  if (summary) summary.focus();
})();
