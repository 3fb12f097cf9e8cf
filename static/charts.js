// Draw every server-built Plotly figure on the page: <div class="chart" data-figure="ID"> takes the
// figure from <script type="application/json" id="ID">, so pages carry no inline script. The config
// (toolbar, logo, links) is the page's one chart style, <script id="foldwise-chart-style"> written by
// templates/base.html from app/web/charts/base.py; static/ensemble.js reads the same.
(function () {
  function draw(root) {
    var config = JSON.parse(document.getElementById("foldwise-chart-style").textContent).config;
    root.querySelectorAll(".chart[data-figure]").forEach(function (element) {
      var source = document.getElementById(element.dataset.figure);
      if (!source) { return; }
      var figure = JSON.parse(source.textContent);
      Plotly.newPlot(element, figure.data, figure.layout, config).then(function () {
        element.dataset.drawn = "true";
      });
    });
  }
  window.foldwiseDraw = draw;
  document.addEventListener("DOMContentLoaded", function () { draw(document); });
})();
