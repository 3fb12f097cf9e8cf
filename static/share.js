// "Share this view": asks the server for a link with a read key for the current page and state.
document.addEventListener("DOMContentLoaded", function () {
  var button = document.getElementById("share-button");
  var output = document.getElementById("share-link");
  if (!button || !output) { return; }
  button.addEventListener("click", function () {
    fetch(button.dataset.endpoint, {
      method: "POST", headers: { "content-type": "application/json" }, credentials: "same-origin",
      body: JSON.stringify({ path: window.location.pathname + window.location.search })
    }).then(function (response) {
      return response.json().then(function (body) { return { ok: response.ok, body: body }; });
    }).then(function (result) {
      output.hidden = false;
      // A refusal's detail is a list of {loc, msg, type}: the messages say what went wrong.
      output.value = result.ok ? result.body.url : ("Could not make a link: " +
        result.body.detail.map(function (entry) { return entry.msg; }).join("; "));
      output.select();
    });
  });
});
