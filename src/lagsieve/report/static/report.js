
(function () {
  'use strict';
  var table = document.getElementById('evidence-table');
  if (table) {
    var tbody = table.tBodies[0];
    var heads = Array.prototype.slice.call(table.tHead.rows[0].cells);
    var cellKey = function (row, i) {
      var c = row.cells[i];
      var v = c.getAttribute('data-v');
      return v === null ? c.textContent.trim() : v;
    };
    heads.forEach(function (th, i) {
      var button = th.querySelector('button');
      if (!button) { return; }
      button.addEventListener('click', function () {
        var dir = th.getAttribute('aria-sort') === 'ascending' ? 'descending' : 'ascending';
        heads.forEach(function (h) { h.removeAttribute('aria-sort'); });
        th.setAttribute('aria-sort', dir);
        var numeric = th.getAttribute('data-type') === 'num';
        var rows = Array.prototype.slice.call(tbody.rows);
        rows.sort(function (a, b) {
          var x = cellKey(a, i), y = cellKey(b, i);
          if (x === '' || y === '') { return (x === '') - (y === ''); }
          var d = numeric ? parseFloat(x) - parseFloat(y) : x.localeCompare(y);
          return dir === 'ascending' ? d : -d;
        });
        rows.forEach(function (r) { tbody.appendChild(r); });
      });
    });
    var text = document.getElementById('f-text');
    var resp = document.getElementById('f-response');
    var grade = document.getElementById('f-grade');
    var count = document.getElementById('f-count');
    var apply = function () {
      var q = text.value.trim().toLowerCase(), shown = 0, all = tbody.rows.length;
      Array.prototype.forEach.call(tbody.rows, function (r) {
        var ok = (!q || r.textContent.toLowerCase().indexOf(q) >= 0) &&
                 (!resp.value || r.getAttribute('data-response') === resp.value) &&
                 (!grade.value || r.getAttribute('data-grade') === grade.value);
        r.hidden = !ok;
        if (ok) { shown += 1; }
      });
      count.textContent = shown + ' of ' + all + ' rows shown';
    };
    if (text && resp && grade && count) {
      text.addEventListener('input', apply);
      resp.addEventListener('change', apply);
      grade.addEventListener('change', apply);
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
