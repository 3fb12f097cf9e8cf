// The overview's "What to ship": the ensemble of the fold winners is scored from every member's stored
// predictions, which takes a moment on a large assessment, so the page shows first and asks for that part
// (server-rendered HTML, app/web/shipping.py) afterwards. No inline scripts; the URL is a data- attribute.
(function () {
  "use strict";

  function fill(holder) {
    fetch(holder.getAttribute("data-fragment-url"), {headers: {accept: "text/html"}, credentials: "same-origin"})
      .then(function (response) {
        if (!response.ok) { throw new Error("the server answered " + response.status); }
        return response.text();
      })
      .then(function (html) {
        holder.innerHTML = html;  // rendered by the server's templates, names escaped there
        holder.setAttribute("data-state", "ready");
      })
      .catch(function (error) {
        holder.textContent = "The ensemble of the fold winners could not be scored: " + error.message +
          ". Reload the page to try again.";
        holder.setAttribute("data-state", "failed");
      });
  }

  document.querySelectorAll("[data-fragment-url]").forEach(fill);
})();
