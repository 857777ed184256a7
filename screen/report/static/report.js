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
  // the words a screen reader hears after a sort (an accessibility audit: nothing was announced)
  var status = null;
  function headerName(th) {
    var copy = th.cloneNode(true);
    Array.prototype.forEach.call(copy.querySelectorAll(".unit, .vh"), function (e) { e.parentNode.removeChild(e); });
    return copy.textContent.replace(/\s+/g, " ").trim();
  }
  function announce(table, th, dir) {
    if (!status) { return; }
    var name = table.caption ? table.caption.textContent.replace(/\s+/g, " ").trim() : "";
    status.textContent = (name ? name + " sorted by " : "Sorted by ") + headerName(th) + ", " + dir;
  }
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
    announce(table, th, dir);
  }
  var sortable = document.querySelectorAll("table.sortable");
  if (sortable.length) {
    status = document.createElement("p");
    status.className = "vh";
    status.id = "sort-status";
    status.setAttribute("aria-live", "polite");
    (document.querySelector("main") || document.body).appendChild(status);
  }
  Array.prototype.forEach.call(sortable, function (table) {
    if (!table.tHead || !table.tBodies.length) { return; }
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, col) {
      if (!th.hasAttribute("data-sort")) { return; }
      th.classList.add("js-sort");
      // the header's content in a button: a control with a role and a name, reached by Tab, pressed with Enter or
      // Space; aria-sort stays on the th (an accessibility audit: a focusable th had no role and its name took the
      // arrow glyph)
      var button = document.createElement("button");
      button.type = "button";
      button.title = "Sort by this column";
      if (th.querySelector(".unit")) { button.className = "stack"; }  // the unit's line, then the arrow's
      while (th.firstChild) { button.appendChild(th.firstChild); }
      th.appendChild(button);
      th.addEventListener("click", function () { sortBy(table, th, col); });
      th.addEventListener("keydown", function (ev) {
        if (ev.target !== th) { return; }  // Enter or Space on the button arrives as its click
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
