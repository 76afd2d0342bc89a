// Halfmark dashboard: the pages work without this file. It only stops a
// form from being sent twice by a double click.
document.addEventListener("submit", function (ev) {
  var f = ev.target;
  if (f.dataset.sent === "1") { ev.preventDefault(); return; }
  f.dataset.sent = "1";
  setTimeout(function () { f.dataset.sent = ""; }, 4000);
});
