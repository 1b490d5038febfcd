// olibra's small scripts: type-ahead filtering of the catalogue and job progress polling.
(function () {
  "use strict";

  function typeahead(form) {
    var input = form.querySelector("input[type=search]");
    var retired = form.querySelector("input[name=retired]");
    var target = document.getElementById(form.dataset.target);
    var timer = null, sequence = 0;
    function refresh() {
      var params = new URLSearchParams();
      if (input.value.trim()) params.set("q", input.value.trim());
      if (retired && retired.checked) params.set("retired", "1");
      var shown = params.toString();
      params.set("fragment", "1");
      var mine = ++sequence;
      fetch(form.dataset.typeahead + "?" + params.toString(), {credentials: "same-origin"})
        .then(function (r) { return r.ok ? r.text() : Promise.reject(r.status); })
        .then(function (html) {
          if (mine !== sequence) return;  // a newer keystroke already answered
          target.innerHTML = html;         // server-rendered and escaped
          history.replaceState(null, "", shown ? "?" + shown : location.pathname);
        })
        .catch(function () { /* the plain form still works */ });
    }
    input.addEventListener("input", function () { clearTimeout(timer); timer = setTimeout(refresh, 200); });
    if (retired) retired.addEventListener("change", refresh);
  }

  function followJob(panel) {
    var bar = document.getElementById("job-progress");
    var state = document.getElementById("job-state");
    var count = document.getElementById("job-count");
    var message = document.getElementById("job-message");
    function poll() {
      fetch(panel.dataset.poll, {credentials: "same-origin", headers: {"Accept": "application/json"}})
        .then(function (r) { return r.json(); })
        .then(function (job) {
          bar.max = Math.max(job.total, 1);
          bar.value = job.total ? Math.min(job.done + job.failed, job.total) : (job.state === "finished" ? 1 : 0);
          state.textContent = job.state;
          state.className = "tag tag-" + job.state;
          count.textContent = job.done + " of " + job.total + " material" + (job.total === 1 ? "" : "s") +
            (job.failed ? ", " + job.failed + " failed" : "");
          message.textContent = job.message || "";
          panel.dataset.state = job.state;
          if (job.state === "queued" || job.state === "running") setTimeout(poll, 1000);
        })
        .catch(function () { setTimeout(poll, 3000); });
    }
    if (panel.dataset.state === "queued" || panel.dataset.state === "running") poll();
  }

  document.addEventListener("DOMContentLoaded", function () {
    document.querySelectorAll("form[data-typeahead]").forEach(typeahead);
    var job = document.getElementById("job");
    if (job) followJob(job);
  });
})();
