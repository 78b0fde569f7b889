// Follows a running job: polls its JSON status and updates the chains table in place; reloads
// the page once the job has ended, so the server renders the verdict, summary and plots.
"use strict";
(function () {
  const section = document.getElementById("job");
  if (!section || section.dataset.terminal === "yes") return;
  const url = section.dataset.statusUrl;
  const terminal = new Set(["succeeded", "failed", "cancelled", "timed_out"]);
  const stateBadge = document.getElementById("job-state");
  const started = document.getElementById("job-started");
  let delay = 1000;

  function show(chain) {
    const row = document.querySelector(`tr[data-chain="${chain.chain}"]`);
    if (!row) return;
    for (const cell of row.querySelectorAll("[data-field]")) {
      const value = chain[cell.dataset.field];
      cell.textContent = value === null || value === undefined ? "–" : String(value);
    }
    const bar = row.querySelector("progress");
    if (bar) {
      bar.max = chain.iterations_total;
      bar.value = chain.iteration;
    }
  }

  async function poll() {
    try {
      const response = await fetch(url, { headers: { Accept: "application/json" } });
      if (response.ok) {
        const job = await response.json();
        job.chains.forEach(show);
        if (started && job.started_at) {
          started.textContent = `${job.started_at.slice(0, 19).replace("T", " ")} UTC`;
        }
        if (stateBadge.textContent !== job.state) {
          stateBadge.textContent = job.state;
          stateBadge.className = `state state-${job.state}`;
        }
        if (terminal.has(job.state)) {
          window.location.reload();
          return;
        }
        delay = 1000;
      } else {
        delay = Math.min(delay * 2, 10000);
      }
    } catch (error) {
      // The service may be restarting; try again, less often.
      delay = Math.min(delay * 2, 10000);
    }
    window.setTimeout(poll, delay);
  }
  window.setTimeout(poll, delay);
})();
