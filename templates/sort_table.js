/* Sort the district table by a column when its heading is clicked. Each cell carries its position in
   the column's natural order (data-order: ids in natural order, terciles low-middle-high, numbers by value),
   so nothing is read from the page's text. */
(function () {
  var table = document.getElementById("district-table");
  if (!table) { return; }
  var heads = table.tHead.rows[0].cells;
  Array.prototype.forEach.call(heads, function (th, index) {
    if (!th.hasAttribute("data-sort")) { return; }
    th.tabIndex = 0;
    th.setAttribute("aria-sort", "none");
    var sort = function () {
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      var ascending = th.getAttribute("aria-sort") !== "ascending";
      rows.sort(function (a, b) {
        var x = parseInt(a.cells[index].getAttribute("data-order"), 10);
        var y = parseInt(b.cells[index].getAttribute("data-order"), 10);
        return ascending ? x - y : y - x;
      });
      rows.forEach(function (row) { body.appendChild(row); });
      Array.prototype.forEach.call(heads, function (h) { if (h.hasAttribute("data-sort")) { h.setAttribute("aria-sort", "none"); } });
      th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    };
    th.addEventListener("click", sort);
    th.addEventListener("keydown", function (e) { if (e.key === "Enter" || e.key === " ") { e.preventDefault(); sort(); } });
  });
})();
