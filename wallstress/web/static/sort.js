// wallstress serve: sort a table by a column when its heading is clicked (or Enter is pressed on it).
// Numbers sort as numbers (each cell's data-sort holds the full value), text as text; empty last.
(function () {
  function sortBy(table, index, th) {
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    var ascending = th.getAttribute("aria-sort") !== "ascending";
    var numeric = rows.every(function (r) {
      var k = r.cells[index].getAttribute("data-sort");
      return k === "" || !isNaN(parseFloat(k));
    });
    rows.sort(function (a, b) {
      var x = a.cells[index].getAttribute("data-sort"), y = b.cells[index].getAttribute("data-sort");
      if (x === "" || y === "") { return x === y ? 0 : (x === "" ? 1 : -1); }
      var c = numeric ? parseFloat(x) - parseFloat(y) : x.localeCompare(y);
      return ascending ? c : -c;
    });
    rows.forEach(function (r) { body.appendChild(r); });
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (h) { h.removeAttribute("aria-sort"); });
    th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
  }
  document.querySelectorAll("table.sortable").forEach(function (table) {
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, i) {
      th.addEventListener("click", function () { sortBy(table, i, th); });
      th.addEventListener("keydown", function (e) { if (e.key === "Enter") { sortBy(table, i, th); } });
    });
  });
})();
