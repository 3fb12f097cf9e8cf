// Draw every server-built Plotly figure on the page: <div class="chart" data-figure="ID"> takes the
// figure from <script type="application/json" id="ID">, so pages carry no inline script.
(function () {
  function draw(root) {
    root.querySelectorAll(".chart[data-figure]").forEach(function (element) {
      var source = document.getElementById(element.dataset.figure);
      if (!source) { return; }
      var figure = JSON.parse(source.textContent);
      var config = Object.assign({ responsive: true, displaylogo: false }, figure.config || {});
      Plotly.newPlot(element, figure.data, figure.layout, config).then(function () {
        element.dataset.drawn = "true";
      });
    });
  }
  window.foldwiseDraw = draw;
  document.addEventListener("DOMContentLoaded", function () { draw(document); });
})();
