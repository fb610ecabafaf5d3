// Changeset table: sorting by column, a text filter and a "flagged only" switch.
// Without scripts the table is complete and already ordered by score; the tools stay hidden.
(function () {
  "use strict";
  var table = document.getElementById("changesets");
  var tools = document.getElementById("changeset-tools");
  if (!table || !tools || !table.tBodies.length) return;
  var body = table.tBodies[0];
  var rows = Array.prototype.slice.call(body.rows);
  var filter = document.getElementById("cs-filter");
  var flaggedOnly = document.getElementById("cs-flagged");
  var status = document.getElementById("cs-status");
  var heads = table.tHead.rows[0].cells;

  function apply() {
    var q = filter.value.trim().toLowerCase();
    var shown = 0;
    rows.forEach(function (r) {
      var ok = (!flaggedOnly.checked || r.classList.contains("flagged")) &&
        (!q || r.textContent.toLowerCase().indexOf(q) !== -1);
      r.hidden = !ok;
      if (ok) shown += 1;
    });
    status.textContent = "Showing " + shown + " of " + rows.length + " changesets";
  }

  function keyOf(row, col, numeric) {
    var cell = row.cells[col];
    var v = cell.getAttribute("data-v");
    if (v === null) v = cell.textContent;
    if (numeric) {
      var n = parseFloat(v.replace(/,/g, ""));
      return isNaN(n) ? -Infinity : n;
    }
    return v.trim().toLowerCase();
  }

  Array.prototype.forEach.call(heads, function (th, col) {
    var kind = th.getAttribute("data-sort");
    if (!kind) return;
    var button = document.createElement("button");
    button.type = "button";
    button.className = "sort";
    while (th.firstChild) button.appendChild(th.firstChild);
    th.appendChild(button);
    button.addEventListener("click", function () {
      var ascending = th.getAttribute("aria-sort") !== "ascending";
      Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
      var numeric = kind === "num";
      var keyed = rows.map(function (r, i) { return [keyOf(r, col, numeric), i, r]; });
      keyed.sort(function (a, b) {
        var c = numeric ? (a[0] < b[0] ? -1 : (a[0] > b[0] ? 1 : 0)) : a[0].localeCompare(b[0]);
        if (!ascending) c = -c;
        return c !== 0 ? c : a[1] - b[1];
      });
      keyed.forEach(function (k) { body.appendChild(k[2]); });
    });
  });

  filter.addEventListener("input", apply);
  flaggedOnly.addEventListener("change", apply);
  tools.hidden = false;
  apply();
})();
