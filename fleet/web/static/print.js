// "Print" buttons (class "print-page") open the browser's print dialog; a file, so pages need no inline script.
document.addEventListener("click", function (event) {
  if (event.target.closest("button.print-page")) { window.print(); }
});
