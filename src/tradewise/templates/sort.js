(function () {
  function key(cell) {
    var v = cell.getAttribute("data-value");
    if (v !== null && v !== "" && !isNaN(Number(v))) { return [0, Number(v)]; }
    return [1, cell.textContent.trim().toLowerCase()];
  }
  function sortable(table) {
    if (!table) { return; }
    var heads = table.tHead.rows[0].cells;
    function sortBy(index) {
      var head = heads[index];
      var down = head.getAttribute("aria-sort") === "ascending";
      for (var i = 0; i < heads.length; i++) { heads[i].removeAttribute("aria-sort"); }
      head.setAttribute("aria-sort", down ? "descending" : "ascending");
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      rows.sort(function (a, b) {
        var x = key(a.cells[index]), y = key(b.cells[index]);
        var order = x[0] - y[0] || (x[1] < y[1] ? -1 : x[1] > y[1] ? 1 : 0);
        return down ? -order : order;
      });
      rows.forEach(function (row) { body.appendChild(row); });
    }
    Array.prototype.forEach.call(heads, function (head, index) {
      var button = head.querySelector("button");
      if (button) { button.addEventListener("click", function () { sortBy(index); }); }
    });
    table.classList.add("sortable");
  }
  sortable(document.getElementById("representatives-table"));
  sortable(document.getElementById("front-table"));
})();
