/* The study board's table: sort by a column heading, show rows by state. Plain JavaScript, no library.
   Each cell carries the value it sorts by in data-v ("" = missing); each heading says data-type="num"
   or "text". Missing values stay last in either direction; ties keep the ranking order (data-order). */
(function () {
  "use strict";
  var table = document.getElementById("ranking-table");
  if (!table || !table.tHead || !table.tBodies.length) {
    return;
  }
  var body = table.tBodies[0];
  var heads = Array.prototype.slice.call(table.tHead.rows[0].cells);
  var count = document.getElementById("row-count");
  var boxes = Array.prototype.slice.call(document.querySelectorAll('input[name="state"]'));

  function cellValue(row, column, numeric) {
    var cell = row.cells[column];
    var text = cell ? cell.getAttribute("data-v") : null;
    if (text === null || text === "") {
      return null;
    }
    if (numeric) {
      var number = Number(text);
      return isFinite(number) ? number : null;
    }
    return text;
  }

  function order(row) {
    return Number(row.getAttribute("data-order"));
  }

  function sortBy(column, direction) {
    var numeric = heads[column].getAttribute("data-type") === "num";
    var rows = Array.prototype.slice.call(body.rows);
    var keyed = rows.map(function (row) {
      return { row: row, value: cellValue(row, column, numeric), order: order(row) };
    });
    keyed.sort(function (a, b) {
      if (a.value === null || b.value === null) {
        if (a.value === b.value) {
          return a.order - b.order;
        }
        return a.value === null ? 1 : -1;
      }
      var c = numeric ? a.value - b.value : a.value.localeCompare(b.value);
      return c === 0 ? a.order - b.order : direction * c;
    });
    var fragment = document.createDocumentFragment();
    keyed.forEach(function (k) {
      fragment.appendChild(k.row);
    });
    body.appendChild(fragment);
    heads.forEach(function (th, i) {
      if (i === column) {
        th.setAttribute("aria-sort", direction > 0 ? "ascending" : "descending");
      } else {
        th.removeAttribute("aria-sort");
      }
    });
  }

  heads.forEach(function (th, column) {
    var button = th.querySelector("button");
    if (!button) {
      return;
    }
    button.addEventListener("click", function () {
      var direction = th.getAttribute("aria-sort") === "ascending" ? -1 : 1;
      sortBy(column, direction);
    });
  });

  function applyFilter() {
    var shown = {};
    boxes.forEach(function (box) {
      shown[box.value] = box.checked;
    });
    var visible = 0;
    var rows = body.rows;
    for (var i = 0; i < rows.length; i += 1) {
      var state = rows[i].getAttribute("data-state");
      var keep = shown[state] !== false;
      rows[i].hidden = !keep;
      if (keep) {
        visible += 1;
      }
    }
    if (count) {
      var states = boxes.filter(function (b) { return b.checked; }).map(function (b) { return b.value; });
      count.textContent = visible + " of " + rows.length + " rows" +
        (states.length === boxes.length ? "" : " (showing " + (states.join(", ") || "no state") + ")");
    }
  }

  boxes.forEach(function (box) {
    box.addEventListener("change", applyFilter);
  });
  applyFilter();

  // Printing: plotly draws at the screen's width, which can be wider than a page. Before printing,
  // narrow wide plots to a landscape A4 or Letter page less its margins; restore them afterwards.
  var PRINT_WIDTH = 940;
  function plots() {
    return Array.prototype.slice.call(document.querySelectorAll(".js-plotly-plot"));
  }
  window.addEventListener("beforeprint", function () {
    if (!window.Plotly) {
      return;
    }
    plots().forEach(function (plot) {
      if (plot.offsetWidth > PRINT_WIDTH) {
        plot.setAttribute("data-print-width", "1");
        window.Plotly.relayout(plot, { width: PRINT_WIDTH });
      }
    });
  });
  window.addEventListener("afterprint", function () {
    if (!window.Plotly) {
      return;
    }
    plots().forEach(function (plot) {
      if (plot.hasAttribute("data-print-width")) {
        plot.removeAttribute("data-print-width");
        window.Plotly.relayout(plot, { width: null, autosize: true });
      }
    });
  });
})();
