// olibra's small scripts: type-ahead filtering of the catalogue, job progress polling, material
// suggestions on the search pages and the blend weight read-out.
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
      ["family", "odor", "sort"].forEach(function (name) {  // the catalogue's filters and sort order
        var field = form.querySelector("[name=" + name + "]");
        if (field && field.value.trim()) params.set(name, field.value.trim());
      });
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

  // A material field that suggests catalogue materials as you type (name, synonym, CAS RN, InChIKey).
  function materialPicker(box) {
    var input = box.querySelector("input");
    var list = box.querySelector(".suggestions");
    var timer = null, sequence = 0, active = -1;
    function hide() { list.hidden = true; list.innerHTML = ""; active = -1; }
    function choose(value) { input.value = value; hide(); input.focus(); }
    function show(materials) {
      list.innerHTML = "";
      materials.forEach(function (m) {
        var item = document.createElement("li");
        item.setAttribute("role", "option");
        var button = document.createElement("button");
        button.type = "button";
        button.className = "suggestion";
        button.dataset.value = m.name;
        var name = document.createElement("span");
        name.textContent = m.name;
        button.appendChild(name);
        var extra = [m.cas, m.synonyms.join(", ")].filter(Boolean).join(" · ");
        if (extra) {
          var small = document.createElement("small");
          small.textContent = extra;
          button.appendChild(small);
        }
        button.addEventListener("mousedown", function (event) { event.preventDefault(); });
        button.addEventListener("click", function () { choose(m.name); });
        item.appendChild(button);
        list.appendChild(item);
      });
      list.hidden = materials.length === 0;
      active = -1;
    }
    function refresh() {
      var text = input.value.trim();
      if (text.length < 2) { hide(); return; }
      var mine = ++sequence;
      fetch(box.dataset.suggest + "?q=" + encodeURIComponent(text), {credentials: "same-origin"})
        .then(function (r) { return r.ok ? r.json() : Promise.reject(r.status); })
        .then(function (data) { if (mine === sequence) show(data.materials); })
        .catch(hide);
    }
    input.addEventListener("input", function () { clearTimeout(timer); timer = setTimeout(refresh, 150); });
    input.addEventListener("blur", function () { setTimeout(hide, 100); });
    input.addEventListener("keydown", function (event) {
      var buttons = list.querySelectorAll("button");
      if (list.hidden || !buttons.length) return;
      if (event.key === "ArrowDown" || event.key === "ArrowUp") {
        event.preventDefault();
        active = (active + (event.key === "ArrowDown" ? 1 : buttons.length - 1)) % buttons.length;
        buttons.forEach(function (b, i) { b.classList.toggle("active", i === active); });
      } else if (event.key === "Enter" && active >= 0) {
        event.preventDefault();
        choose(buttons[active].dataset.value);
      } else if (event.key === "Escape") {
        hide();
      }
    });
  }

  function weightReadout(slider) {
    var output = document.getElementById("weight-value");
    if (!output) return;
    slider.addEventListener("input", function () { output.textContent = Number(slider.value).toFixed(2); });
  }

  document.addEventListener("DOMContentLoaded", function () {
    document.querySelectorAll(".picker[data-suggest]").forEach(materialPicker);
    var weight = document.querySelector("input[type=range]#weight");
    if (weight) weightReadout(weight);
    document.querySelectorAll("form[data-typeahead]").forEach(typeahead);
    var job = document.getElementById("job");
    if (job) followJob(job);
  });
})();
