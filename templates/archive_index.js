/* Sort the archive table by a column when its heading is clicked or Enter is pressed on it. */
(function () {
  var table = document.getElementById("archive-table");
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
        var x = a.cells[index].getAttribute("data-key") || a.cells[index].textContent.trim();
        var y = b.cells[index].getAttribute("data-key") || b.cells[index].textContent.trim();
        var order = kind === "num" ? (parseFloat(x) || 0) - (parseFloat(y) || 0)
                                   : x.localeCompare(y, undefined, {numeric: true});
        return ascending ? order : -order;
      });
      rows.forEach(function (row) { body.appendChild(row); });
      Array.prototype.forEach.call(heads, function (h) { if (h.hasAttribute("data-sort")) { h.setAttribute("aria-sort", "none"); } });
      th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    };
    th.addEventListener("click", sort);
    th.addEventListener("keydown", function (event) { if (event.key === "Enter") { sort(); } });
  });
}());
