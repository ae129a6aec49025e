/* Draws the page's plotly figures (fleet.charts.chart_html) once the page is laid out, so each chart takes its
   card's width from the first paint, and redraws a chart when its card changes width (a turned phone, a sidebar,
   printing). Loaded at the end of the page, after plotly.min.js, both from this server. */
(function () {
  "use strict";
  var PRINT_WIDTH = 680;  /* px: an A4 or Letter page in portrait, less margins */

  function watch(div) {
    if (!window.ResizeObserver) { return; }
    var width = div.clientWidth;
    new ResizeObserver(function () {
      if (div.clientWidth !== width && !div.classList.contains("printing")) {
        width = div.clientWidth;
        Plotly.Plots.resize(div);
      }
    }).observe(div);
  }

  function draw(spec) {
    var div = document.getElementById(spec.getAttribute("data-for"));
    if (!div || typeof Plotly === "undefined") { return; }
    var figure = JSON.parse(spec.textContent);
    Plotly.newPlot(div, figure.data, figure.layout, figure.config).then(function () { watch(div); });
  }

  function charts() { return Array.prototype.slice.call(document.querySelectorAll(".fleet-chart.js-plotly-plot")); }

  /* Paper is narrower than most screens: draw at a page's width while printing, then follow the card again. */
  function toPaper() {
    charts().forEach(function (div) {
      div.classList.add("printing");
      Plotly.relayout(div, {width: Math.min(PRINT_WIDTH, div.clientWidth || PRINT_WIDTH)});
    });
  }
  function toScreen() {
    charts().forEach(function (div) {
      div.classList.remove("printing");
      Plotly.relayout(div, {width: null, autosize: true});
    });
  }

  Array.prototype.forEach.call(document.querySelectorAll("script.fleet-chart-spec"), draw);
  window.addEventListener("beforeprint", toPaper);
  window.addEventListener("afterprint", toScreen);
})();
