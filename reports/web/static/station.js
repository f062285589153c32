// The operator page: live progress from server-sent events, Esc stops the run, the verdict is drawn by
// the server (the page reloads when the run ends). Text from the server is set with textContent only.
(function () {
  "use strict";
  var run = document.getElementById("run");
  var list = document.getElementById("step-list");
  var rows = {};

  function el(tag, cls, text) {
    var node = document.createElement(tag);
    if (cls) { node.className = cls; }
    if (text !== undefined) { node.textContent = text; }
    return node;
  }

  function onStep(e) {
    var d = JSON.parse(e.data);
    var li = el("li", "step step-running");
    li.appendChild(el("span", "step-no", (d.step + 1) + "/" + d.total));
    li.appendChild(document.createTextNode(" "));
    li.appendChild(el("span", "step-name", d.name));
    li.appendChild(document.createTextNode(" "));
    li.appendChild(el("span", "step-state", "testing (" + d.readings + ")"));
    li.appendChild(el("ul", "readings"));
    list.appendChild(li);
    rows[d.step] = li;
    li.scrollIntoView({block: "nearest"});
  }

  function onPoint(e) {
    var d = JSON.parse(e.data);
    var li = rows[d.step];
    if (!li) { return; }
    var r = el("li", d.ok ? "ok" : "bad");
    r.appendChild(el("span", "r-mark", d.ok ? "\u2713" : "\u2717"));
    r.appendChild(document.createTextNode(" " + d.what + ": "));
    r.appendChild(el("b", "", d.value));
    if (d.note) { r.appendChild(document.createTextNode(" ")); r.appendChild(el("span", "r-word", d.note)); }
    li.querySelector(".readings").appendChild(r);
  }

  function onStepEnd(e) {
    var d = JSON.parse(e.data);
    var li = rows[d.step];
    if (!li) { return; }
    li.className = "step step-" + d.verdict;
    li.querySelector(".step-state").textContent = d.words;
    if (d.failed && d.failed.length) {
      var ul = el("ul", "failed");
      d.failed.forEach(function (line) { ul.appendChild(el("li", "", line)); });
      li.insertBefore(ul, li.querySelector(".readings"));
    } else if (d.message) {
      li.insertBefore(el("p", "step-message", d.message), li.querySelector(".readings"));
    }
  }

  if (run && run.dataset.finished !== "true" && window.EventSource) {
    while (list.firstChild) { list.removeChild(list.firstChild); }  // the stream replays the run from its start
    var source = new EventSource(run.dataset.events);
    source.addEventListener("step", onStep);
    source.addEventListener("point", onPoint);
    source.addEventListener("step_end", onStepEnd);
    source.addEventListener("end", function () {
      source.close();
      window.location.replace(run.dataset.page);
    });
  }

  document.addEventListener("keydown", function (ev) {
    var stop = document.getElementById("stop-form");
    if (ev.key === "Escape" && stop) {
      ev.preventDefault();
      stop.submit();
    }
  });

  var serial = document.getElementById("serial");
  if (serial && !document.querySelector(".problem")) { serial.select(); }
}());
