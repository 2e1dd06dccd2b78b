(function () {
  var table = document.getElementById("audit-table");
  if (!table) { return; }
  var body = table.tBodies[0];
  var rows = Array.prototype.slice.call(body.rows);
  var text = rows.map(function (r) { return r.textContent.toLowerCase(); });
  var heads = table.tHead.rows[0].cells;
  Array.prototype.forEach.call(heads, function (th, col) {
    th.querySelector("button").addEventListener("click", function () {
      var up = th.getAttribute("aria-sort") !== "ascending";
      Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", up ? "ascending" : "descending");
      var numeric = th.getAttribute("data-type") === "number";
      var keyed = rows.map(function (r, i) {
        var cell = r.cells[col];
        var raw = cell.getAttribute("data-v");
        var key = numeric ? (raw === null || raw === "" ? NaN : parseFloat(raw)) : cell.textContent;
        return { row: r, key: key, i: i };
      });
      keyed.sort(function (a, b) {
        var d;
        if (numeric) {
          var an = isNaN(a.key), bn = isNaN(b.key);
          if (an || bn) { return an === bn ? a.i - b.i : (an ? 1 : -1); }
          d = a.key - b.key;
        } else {
          d = a.key.localeCompare(b.key, undefined, { numeric: true });
        }
        return (up ? d : -d) || a.i - b.i;
      });
      var frag = document.createDocumentFragment();
      keyed.forEach(function (k) { frag.appendChild(k.row); });
      body.appendChild(frag);
    });
  });
  var box = document.getElementById("audit-filter");
  var shown = document.getElementById("audit-shown");
  box.addEventListener("input", function () {
    var words = box.value.toLowerCase().split(/\s+/).filter(Boolean);
    var n = 0;
    rows.forEach(function (r, i) {
      var hit = words.every(function (w) { return text[i].indexOf(w) !== -1; });
      r.hidden = !hit;
      if (hit) { n += 1; }
    });
    shown.textContent = n.toLocaleString("en") + " of " + rows.length.toLocaleString("en") + " items shown";
  });
})();
