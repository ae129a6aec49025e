// Draws every chart a page carries: each <div class="plotly-chart"> has its figure as JSON in the <script
// type="application/json" id="<div id>-figure"> beside it. Loaded as a file so pages need no inline script.
(function () {
  function draw() {
    document.querySelectorAll("div.plotly-chart").forEach(function (div) {
      var source = document.getElementById(div.id + "-figure");
      if (!source || !window.Plotly) { return; }
      var figure = JSON.parse(source.textContent);
      var config = JSON.parse(div.getAttribute("data-config") || "{}");
      window.Plotly.newPlot(div, figure.data, figure.layout, config);
    });
  }
  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", draw);
  } else {
    draw();
  }
})();
