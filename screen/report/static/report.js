(function () {
  "use strict";
  function key(cell, kind) {
    var raw = cell ? cell.getAttribute("data-value") : null;
    if (raw === null) { raw = cell ? cell.textContent : ""; }
    if (kind === "num") {
      var x = parseFloat(raw);
      return isFinite(x) ? x : null;
    }
    raw = String(raw).trim();
    return raw === "" ? null : raw;
  }
  var collator = new Intl.Collator(undefined, {numeric: true, sensitivity: "base"});
  function sortBy(table, th, col) {
    var kind = th.getAttribute("data-sort");
    var current = th.getAttribute("aria-sort");
    var first = th.getAttribute("data-first") || "ascending";
    var dir = current === "ascending" ? "descending" : current === "descending" ? "ascending" : first;
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows).map(function (tr, i) {
      return {tr: tr, i: i, k: key(tr.cells[col], kind)};
    });
    var sign = dir === "ascending" ? 1 : -1;
    rows.sort(function (a, b) {
      if (a.k === null && b.k === null) { return a.i - b.i; }
      if (a.k === null) { return 1; }
      if (b.k === null) { return -1; }
      var c = kind === "num" ? (a.k < b.k ? -1 : a.k > b.k ? 1 : 0) : collator.compare(a.k, b.k);
      return c !== 0 ? sign * c : a.i - b.i;
    });
    var frag = document.createDocumentFragment();
    rows.forEach(function (r) { frag.appendChild(r.tr); });
    body.appendChild(frag);
    Array.prototype.forEach.call(th.parentNode.cells, function (h) { h.removeAttribute("aria-sort"); });
    th.setAttribute("aria-sort", dir);
  }
  Array.prototype.forEach.call(document.querySelectorAll("table.sortable"), function (table) {
    if (!table.tHead || !table.tBodies.length) { return; }
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, col) {
      if (!th.hasAttribute("data-sort")) { return; }
      th.classList.add("js-sort");
      th.tabIndex = 0;
      th.title = "Sort by this column";
      th.addEventListener("click", function () { sortBy(table, th, col); });
      th.addEventListener("keydown", function (ev) {
        if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); sortBy(table, th, col); }
      });
    });
  });
  // collapsed <details> (the table of every ranked row) would not print: open them for printing, then restore
  var opened = [];
  window.addEventListener("beforeprint", function () {
    Array.prototype.forEach.call(document.querySelectorAll("details:not([open])"), function (d) {
      d.open = true;
      opened.push(d);
    });
  });
  window.addEventListener("afterprint", function () {
    opened.forEach(function (d) { d.open = false; });
    opened = [];
  });
})();
