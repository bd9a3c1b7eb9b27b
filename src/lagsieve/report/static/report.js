
(function () {
  'use strict';
  // controls that need this script are hidden until it runs (report.css: html:not(.js) .needs-js)
  document.documentElement.classList.add('js');
  var table = document.getElementById('evidence-table');
  if (table) {
    var tbody = table.tBodies[0];
    var heads = Array.prototype.slice.call(table.tHead.rows[0].cells);
    var cellKey = function (row, i) {
      var c = row.cells[i];
      var v = c.getAttribute('data-v');
      return v === null ? c.textContent.trim() : v;
    };
    var sortBy = function (th, i) {
      var dir = th.getAttribute('aria-sort') === 'ascending' ? 'descending' : 'ascending';
      heads.forEach(function (h) { h.removeAttribute('aria-sort'); });
      th.setAttribute('aria-sort', dir);
      var numeric = th.getAttribute('data-type') === 'num';
      var grouped = th.getAttribute('data-group') === 'response';  // rank: within each response
      var rows = Array.prototype.slice.call(tbody.rows);
      rows.sort(function (a, b) {
        if (grouped) {
          var g = parseFloat(a.getAttribute('data-group')) - parseFloat(b.getAttribute('data-group'));
          if (g !== 0) { return g; }
        }
        var x = cellKey(a, i), y = cellKey(b, i);
        if (x === '' || y === '') { return (x === '') - (y === ''); }  // empty cells last either way
        var d = numeric ? parseFloat(x) - parseFloat(y) : x.localeCompare(y);
        return dir === 'ascending' ? d : -d;
      });
      rows.forEach(function (r) { tbody.appendChild(r); });
    };
    heads.forEach(function (th, i) {
      // each heading becomes a button here, so that a page without the script has none that do nothing
      var button = document.createElement('button');
      button.type = 'button';
      while (th.firstChild) { button.appendChild(th.firstChild); }
      th.appendChild(button);
      button.addEventListener('click', function () { sortBy(th, i); });
    });
    var field = function (id) { return document.getElementById(id); };
    var text = field('f-text'), driver = field('f-driver'), grade = field('f-grade');
    var flag = field('f-flag'), resp = field('f-response'), count = field('f-count');
    var hasFlag = function (r, f) {
      var codes = r.getAttribute('data-flags');
      return f === '-' ? codes === '' : (' ' + codes + ' ').indexOf(' ' + f + ' ') >= 0;
    };
    var apply = function () {
      var q = text.value.trim().toLowerCase(), d = driver.value.trim().toLowerCase();
      var shown = 0, all = tbody.rows.length;
      Array.prototype.forEach.call(tbody.rows, function (r) {
        var ok = (!q || r.textContent.toLowerCase().indexOf(q) >= 0) &&
                 (!d || r.getAttribute('data-driver').indexOf(d) >= 0) &&
                 (!grade.value || r.getAttribute('data-grade') === grade.value) &&
                 (!flag.value || hasFlag(r, flag.value)) &&
                 (!resp.value || r.getAttribute('data-response') === resp.value);
        r.hidden = !ok;
        if (ok) { shown += 1; }
      });
      count.textContent = shown + ' of ' + all + ' rows shown';
    };
    if (text && driver && grade && flag && resp && count) {
      [text, driver].forEach(function (el) { el.addEventListener('input', apply); });
      [grade, flag, resp].forEach(function (el) { el.addEventListener('change', apply); });
    }
  }
  var copy = document.getElementById('copy-methods');
  var methods = document.getElementById('methods-text');
  if (copy && methods) {
    var select = function () {
      var range = document.createRange();
      range.selectNodeContents(methods);
      var sel = window.getSelection();
      sel.removeAllRanges();
      sel.addRange(range);
      copy.textContent = 'Selected: press Ctrl+C to copy';
    };
    copy.addEventListener('click', function () {
      if (navigator.clipboard && window.isSecureContext) {
        navigator.clipboard.writeText(methods.innerText).then(function () {
          copy.textContent = 'Copied';
        }, select);
      } else {
        select();
      }
    });
  }
}());
