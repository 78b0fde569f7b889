// After a refused submission, move keyboard focus to the list of problems so that a screen
// reader announces it and Tab continues from there to the fields.
"use strict";
(function () {
  const summary = document.getElementById("problem-summary");
  if (summary) summary.focus();
})();
