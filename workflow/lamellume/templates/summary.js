(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("lamellume-data").textContent);
  var table = document.getElementById("screen-table");
  var tbody = table ? table.tBodies[0] : null;
  var rows = tbody ? Array.prototype.slice.call(tbody.rows) : [];
  var rowById = new Map();
  rows.forEach(function (tr) { rowById.set(tr.getAttribute("data-id"), tr); });
  var filter = document.getElementById("filter");
  var only = document.getElementById("only-cand");
  var shown = document.getElementById("shown");
  var marks = Array.prototype.slice.call(document.querySelectorAll("svg.chart [data-id]"));

  function apply() {
    var q = (filter && filter.value || "").trim().toLowerCase();
    var terms = q ? q.split(/\s+/) : [];
    var candOnly = only && only.checked;
    var visible = new Set();
    rows.forEach(function (tr) {
      var text = tr.getAttribute("data-search") || "";
      var ok = (!candOnly || tr.getAttribute("data-candidate") === "1") &&
        terms.every(function (t) { return text.indexOf(t) !== -1; });
      tr.hidden = !ok;
      if (ok) { visible.add(tr.getAttribute("data-id")); }
    });
    var active = candOnly || terms.length > 0;
    marks.forEach(function (m) {
      m.classList.toggle("dim", active && !visible.has(m.getAttribute("data-id")));
    });
    if (shown) { shown.textContent = visible.size + " of " + rows.length + " shown"; }
  }
  if (filter) { filter.addEventListener("input", apply); }
  if (only) { only.addEventListener("change", apply); }

  function sortBy(th) {
    var idx = Array.prototype.indexOf.call(th.parentNode.children, th);
    var numeric = th.getAttribute("data-type") === "num";
    var dir = th.getAttribute("aria-sort") === "ascending" ? -1 : 1;
    Array.prototype.forEach.call(th.parentNode.children, function (h) { h.setAttribute("aria-sort", "none"); });
    th.setAttribute("aria-sort", dir === 1 ? "ascending" : "descending");
    var keyed = rows.map(function (tr, i) {
      var cell = tr.cells[idx];
      var v = !cell ? "" : (cell.hasAttribute("data-v") ? cell.getAttribute("data-v") : cell.textContent);
      return { tr: tr, i: i, v: v, n: v === "" || v === null ? NaN : Number(v) };
    });
    keyed.sort(function (a, b) {
      var c;
      if (numeric) {
        var an = isNaN(a.n), bn = isNaN(b.n);
        if (an || bn) { return an && bn ? a.i - b.i : (an ? 1 : -1); }
        c = a.n - b.n;
      } else {
        c = String(a.v).localeCompare(String(b.v), undefined, { numeric: true });
      }
      return c !== 0 ? dir * c : a.i - b.i;
    });
    var frag = document.createDocumentFragment();
    keyed.forEach(function (k) { frag.appendChild(k.tr); });
    tbody.appendChild(frag);
  }
  if (table) {
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th) {
      th.addEventListener("click", function () { sortBy(th); });
      th.addEventListener("keydown", function (ev) {
        if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); sortBy(th); }
      });
    });
  }

  var tip = document.getElementById("tip");
  function highlight(id, on) {
    var tr = rowById.get(id);
    if (tr) { tr.classList.toggle("hl", on); }
    marks.forEach(function (m) { if (m.getAttribute("data-id") === id) { m.classList.toggle("hl", on); } });
  }
  Array.prototype.forEach.call(document.querySelectorAll("svg.chart [data-tip]"), function (el) {
    var t = el.querySelector("title");
    if (t) { t.parentNode.removeChild(t); }
    el.addEventListener("mouseenter", function () {
      tip.textContent = el.getAttribute("data-tip");
      tip.style.display = "block";
      var id = el.getAttribute("data-id");
      if (id !== null) { highlight(id, true); }
    });
    el.addEventListener("mousemove", function (ev) {
      var x = ev.clientX + 14, y = ev.clientY + 14;
      if (x + tip.offsetWidth > window.innerWidth - 8) { x = ev.clientX - tip.offsetWidth - 14; }
      if (y + tip.offsetHeight > window.innerHeight - 8) { y = ev.clientY - tip.offsetHeight - 14; }
      tip.style.left = x + "px"; tip.style.top = y + "px";
    });
    el.addEventListener("mouseleave", function () {
      tip.style.display = "none";
      var id = el.getAttribute("data-id");
      if (id !== null) { highlight(id, false); }
    });
    el.addEventListener("click", function () { jump(el.getAttribute("data-id")); });
  });

  function jump(id) {
    var tr = rowById.get(id);
    if (!tr) { return; }
    if (tr.hidden) { if (filter) { filter.value = ""; } if (only) { only.checked = false; } apply(); }
    tr.scrollIntoView({ block: "center" });
    tr.classList.remove("flash"); void tr.offsetWidth; tr.classList.add("flash");
  }
  Array.prototype.forEach.call(document.querySelectorAll("a.jump"), function (a) {
    a.addEventListener("click", function (ev) { ev.preventDefault(); jump(a.getAttribute("data-id")); });
  });

  function csvCell(v) {
    if (v === null || v === undefined) { return ""; }
    var s = String(v);
    if (typeof v === "string" && /^[=+\-@\t\r]/.test(s)) { s = "'" + s; }  // numbers stay numbers
    return /[",\n\r]/.test(s) ? '"' + s.replace(/"/g, '""') + '"' : s;
  }
  var button = document.getElementById("csv");
  if (button) {
    button.addEventListener("click", function () {
      var lines = [data.columns.map(csvCell).join(",")];
      var order = Array.prototype.slice.call(tbody.rows).filter(function (tr) { return !tr.hidden; });
      order.forEach(function (tr) {
        var rec = data.rows[tr.getAttribute("data-id")];
        if (rec) { lines.push(rec.map(csvCell).join(",")); }
      });
      var blob = new Blob([lines.join("\r\n") + "\r\n"], { type: "text/csv" });
      var a = document.createElement("a");
      a.href = URL.createObjectURL(blob);
      a.download = "lamellume-shortlist-" + data.config_hash + ".csv";
      document.body.appendChild(a); a.click(); a.remove();
      setTimeout(function () { URL.revokeObjectURL(a.href); }, 1000);
    });
  }
  apply();
  document.documentElement.setAttribute("data-ready", "1");
})();
