// A select marked data-autosubmit sends its GET form on change, so the view's state lands in the URL.
document.addEventListener("change", function (event) {
  if (event.target.matches("select[data-autosubmit]")) { event.target.form.submit(); }
});
