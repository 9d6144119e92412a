// brakeledger's web page: two small conveniences, no libraries. The page works without them.
"use strict";
document.addEventListener("DOMContentLoaded", function () {
  // Filter and plan forms apply as soon as a choice changes.
  document.querySelectorAll("form[data-autosubmit]").forEach(function (form) {
    form.querySelectorAll("select, input[type=date]").forEach(function (field) {
      field.addEventListener("change", function () { form.submit(); });
    });
  });
  // The vehicle search box hides the overview rows that do not contain what is typed.
  document.querySelectorAll("input[data-filters]").forEach(function (box) {
    var table = document.getElementById(box.getAttribute("data-filters"));
    if (!table) { return; }
    box.addEventListener("input", function () {
      var wanted = box.value.trim().toLowerCase();
      table.querySelectorAll("tbody tr").forEach(function (row) {
        row.hidden = wanted !== "" && row.textContent.toLowerCase().indexOf(wanted) < 0;
      });
    });
  });
});
