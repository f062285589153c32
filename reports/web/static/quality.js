// The yield page refreshes its own figures: every data-refresh-s seconds it fetches the same address
// again and swaps in the new #live section. No page reload, so the reader keeps their place.
(function () {
  "use strict";
  var live = document.getElementById("live");
  if (!live) { return; }
  var seconds = parseInt(live.getAttribute("data-refresh-s"), 10);
  if (!(seconds >= 5)) { return; }
  function say(text) {
    var status = document.getElementById("live-status");
    if (status) { status.textContent = text; }
  }
  function refresh() {
    fetch(window.location.href, { credentials: "same-origin", cache: "no-store" })
      .then(function (response) {
        if (!response.ok) { throw new Error("the server answered " + response.status); }
        return response.text();
      })
      .then(function (html) {
        var fresh = new DOMParser().parseFromString(html, "text/html").getElementById("live");
        if (!fresh) { throw new Error("your session may have ended: log in again"); }
        live.innerHTML = fresh.innerHTML;
      })
      .catch(function (error) { say("Not updated: " + error.message + "."); });
  }
  window.setInterval(refresh, seconds * 1000);
}());
