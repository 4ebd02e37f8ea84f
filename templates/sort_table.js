/* Sort the district table by a column when its heading is clicked (no data is read from the page's text into HTML). */
(function () {
  var table = document.getElementById("district-table");
  if (!table) { return; }
  var heads = table.tHead.rows[0].cells;
  Array.prototype.forEach.call(heads, function (th, index) {
    var kind = th.getAttribute("data-sort");
    if (!kind) { return; }
    th.tabIndex = 0;
    th.setAttribute("aria-sort", "none");
    var sort = function () {
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      var ascending = th.getAttribute("aria-sort") !== "ascending";
      rows.sort(function (a, b) {
        var x = a.cells[index].textContent.trim(), y = b.cells[index].textContent.trim();
        if (kind === "num") {
          var fx = parseFloat(x.replace(/[^0-9.\u2212+-]/g, "").replace("\u2212", "-"));
          var fy = parseFloat(y.replace(/[^0-9.\u2212+-]/g, "").replace("\u2212", "-"));
          if (isNaN(fx)) { fx = -Infinity; }
          if (isNaN(fy)) { fy = -Infinity; }
          return ascending ? fx - fy : fy - fx;
        }
        return ascending ? x.localeCompare(y) : y.localeCompare(x);
      });
      rows.forEach(function (row) { body.appendChild(row); });
      Array.prototype.forEach.call(heads, function (h) { if (h.hasAttribute("data-sort")) { h.setAttribute("aria-sort", "none"); } });
      th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    };
    th.addEventListener("click", sort);
    th.addEventListener("keydown", function (e) { if (e.key === "Enter" || e.key === " ") { e.preventDefault(); sort(); } });
  });
})();
