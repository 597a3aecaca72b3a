// Sorting of tables marked data-sortable, in the browser. Without JavaScript the column
// headers are links that ask the server for the sorted page (or, in a static report,
// the table stays in product order).
(function () {
  "use strict";

  function cellValue(row, index, numeric) {
    var cell = row.children[index];
    var raw = cell ? cell.getAttribute("data-sort-value") : "";
    if (raw === null || raw === "") { return null; }
    if (numeric) {
      var number = parseFloat(raw);
      return isNaN(number) ? null : number;
    }
    return raw.toLowerCase();
  }

  function sortBy(table, header, index) {
    var numeric = header.hasAttribute("data-numeric");
    var descending = header.getAttribute("aria-sort") === "ascending";
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    rows.sort(function (a, b) {
      var x = cellValue(a, index, numeric);
      var y = cellValue(b, index, numeric);
      if (x === null && y === null) { return 0; }
      if (x === null) { return 1; }   // rows without a value always come last
      if (y === null) { return -1; }
      var order = x < y ? -1 : x > y ? 1 : 0;
      return descending ? -order : order;
    });
    rows.forEach(function (row) { body.appendChild(row); });
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (cell) {
      cell.removeAttribute("aria-sort");
    });
    header.setAttribute("aria-sort", descending ? "descending" : "ascending");
    var status = document.getElementById("sort-status");
    if (status) {
      status.textContent = "Sorted by " + header.getAttribute("data-label") + (descending ? ", descending" : ", ascending");
    }
  }

  function enhance(table) {
    var status = document.createElement("p");
    status.id = "sort-status";
    status.className = "visually-hidden";
    status.setAttribute("role", "status");
    table.parentNode.insertBefore(status, table);
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (header, index) {
      if (!header.hasAttribute("data-sort-key")) { return; }
      var label = header.getAttribute("data-label") || header.textContent.trim();
      var button = document.createElement("button");
      button.type = "button";
      button.className = "sort";
      button.textContent = label;
      button.setAttribute("data-sort-key", header.getAttribute("data-sort-key"));
      button.addEventListener("click", function () { sortBy(table, header, index); });
      header.textContent = "";
      header.appendChild(button);
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    Array.prototype.forEach.call(document.querySelectorAll("table[data-sortable]"), enhance);
  });
})();
