"""The backtest report as one self-contained HTML page: inline CSS, inline SVG charts drawn
here (readable without script), a small inline script that sorts the events table, and the
report's data embedded as JSON (``<script type="application/json" id="backtest-data">``,
equal to what ``--json`` writes). Nothing is fetched from the network."""

from __future__ import annotations

import json
import time
from html import escape
from typing import Any

from stream_miner.report.charts import PALETTE, Line, Marker, line_chart

DATA_ID = "backtest-data"

STYLE = """
body{font:14px/1.45 system-ui,sans-serif;margin:0 auto;max-width:1000px;padding:1em 1.5em;color:#1f2328}
h1{font-size:1.5em;margin:.2em 0}h2{font-size:1.15em;margin:1.6em 0 .4em;border-bottom:1px solid #d0d7de}
.cards{display:flex;flex-wrap:wrap;gap:.6em}
.card{border:1px solid #d0d7de;border-radius:6px;padding:.4em .8em}.card b{display:block;font-size:1.3em}
table{border-collapse:collapse;width:100%}
th,td{padding:.25em .5em;border-bottom:1px solid #eaeef2;text-align:left;vertical-align:top}
td.n,th.n{text-align:right;font-variant-numeric:tabular-nums}
table.sortable th{cursor:pointer;user-select:none;background:#f6f8fa}
table.sortable th[aria-sort=ascending]::after{content:" \\25B2"}
table.sortable th[aria-sort=descending]::after{content:" \\25BC"}
.chart{width:100%;height:auto}.chart .grid line{stroke:#eaeef2}.chart text{font-size:11px;fill:#57606a}
.chart .axis{font-size:12px;fill:#1f2328}.chart .series{fill:none;stroke-width:1.8;stroke-linecap:round;
stroke-linejoin:round}.chart .marker line{stroke-dasharray:4 3}
.legend{display:flex;flex-wrap:wrap;gap:.3em 1.2em;margin:.3em 0}.legend i{display:inline-block;width:1.4em;
height:.3em;vertical-align:middle;margin-right:.35em}.emerged{color:#1a7f37}.faded{color:#c62828}
code{background:#f6f8fa;padding:.1em .3em;border-radius:4px;word-break:break-word}.note{color:#57606a}
"""

SCRIPT = """
document.querySelectorAll("table.sortable").forEach(function (table) {
  var heads = table.querySelectorAll("th");
  heads.forEach(function (th, column) {
    th.addEventListener("click", function () {
      var up = th.getAttribute("aria-sort") !== "ascending";
      heads.forEach(function (h) { h.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", up ? "ascending" : "descending");
      var numeric = th.classList.contains("n"), body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      rows.sort(function (a, b) {
        var x = a.cells[column].dataset.v, y = b.cells[column].dataset.v;
        var c = numeric ? parseFloat(x) - parseFloat(y) : x.localeCompare(y);
        return up ? c : -c;
      });
      rows.forEach(function (row) { body.appendChild(row); });
    });
  });
});
"""


def render(data: dict[str, Any]) -> str:
    """The report page for ``data`` (from :func:`stream_miner.report.data.backtest_data`)."""
    source = data["input"]["source"]
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Backtest: {escape(source)}</title><style>{STYLE}</style></head><body>",
        f"<h1>Backtest of {escape(source)}</h1>",
        _overview(data),
        _settings(data),
        _timeline(data),
        _events(data),
        _detector(data),
        _throughput(data),
        f'<script type="application/json" id="{DATA_ID}">{embedded_json(data)}</script>',
        f"<script>{SCRIPT}</script>",
        "</body></html>",
    ]
    return "\n".join(parts) + "\n"


def embedded_json(data: dict[str, Any]) -> str:
    """``data`` as JSON that cannot end its script element: ``<``, ``>`` and ``&`` escaped."""
    text = json.dumps(data, ensure_ascii=False, allow_nan=False)
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def _overview(data: dict[str, Any]) -> str:
    run, detector = data["run"], data["detector"]
    rate = run["baskets_per_second"]
    cards = [
        ("baskets", f"{run['baskets']:,}"),
        ("ticks", f"{run['ticks']:,}"),
        ("emerged", f"{detector['emerged']:,}"),
        ("faded", f"{detector['faded']:,}"),
        ("baskets a second", "n/a" if rate is None else f"{rate:,.0f}"),
        ("wall time", f"{run['wall_seconds']:.1f} s"),
    ]
    html = ['<div class="cards">']
    html += [f'<div class="card">{escape(name)}<b>{escape(value)}</b></div>' for name, value in cards]
    html.append("</div>")
    if not run["complete"]:
        html.append('<p class="note">The replay was stopped before the end of the input.</p>')
    return "".join(html)


def _settings(data: dict[str, Any]) -> str:
    rows = "".join(
        f"<tr><th>--{escape(name)}</th><td>{escape(_value(value))}</td></tr>"
        for name, value in data["settings"].items()
    )
    command = " ".join(data["run_options"])
    return (
        f"<h2>Settings</h2><table>{rows}</table>"
        f"<p>The same settings for <code>stream-miner run</code>: <code>{escape(command)}</code></p>"
        f'<p class="note">Input format: {escape(data["input"]["format"])}.</p>'
    )


def _timeline(data: dict[str, Any]) -> str:
    patterns = data["patterns"]
    every = data["timeline"]["every"]
    markers = [
        Marker(e["baskets"], e["event"], f"{e['event']} {' + '.join(e['items'])} (tick {e['tick']})")
        for e in data["events"]
    ]
    support_lines, lift_lines, legend = [], [], []
    for k, pattern in enumerate(patterns):
        colour = PALETTE[k % len(PALETTE)]
        label = " + ".join(pattern["items"])
        support_lines.append(Line(label, colour, _segments(pattern["points"], 2, every)))
        lift_lines.append(Line(label, colour, _segments(pattern["points"], 3, every)))
        legend.append(f'<span><i style="background:{colour}"></i>{escape(label)}</span>')
    if not patterns:
        return "<h2>Timeline</h2><p>No pattern was tracked: nothing passed the thresholds.</p>"
    sampled = "every tick" if every == 1 else f"one tick in {every:,} and every tick with an event"
    return (
        "<h2>Timeline</h2>"
        f'<p class="note">Support and lift (of the best rule) of the {len(patterns)} charted patterns '
        f"(those with events first, then those tracked longest), at {sampled}; markers: "
        '<span class="emerged">&#9650; emerged</span>, <span class="faded">&#9660; faded</span>.</p>'
        f'<div class="legend">{"".join(legend)}</div>'
        + line_chart(support_lines, markers, y_label="support", y_format=lambda v: f"{100 * v:g}%")
        + line_chart(lift_lines, markers, y_label="lift", y_floor=1.0)
    )


def _segments(points: list[list], column: int, every: int) -> list[list[tuple[float, float]]]:
    """(baskets, value) runs of ``points``, split where a sampled tick is missing (the pattern
    was not tracked there) or the value is unknown."""
    segments: list[list[tuple[float, float]]] = []
    previous = None
    for point in points:
        tick, baskets, value = point[0], point[1], point[column]
        if value is None:
            previous = None
            continue
        if previous is None or tick - previous > every:
            segments.append([])
        segments[-1].append((float(baskets), float(value)))
        previous = tick
    return segments


EVENT_COLUMNS = (
    ("tick", True),
    ("baskets read", True),
    ("event", False),
    ("items", False),
    ("support", True),
    ("baseline support", True),
    ("confidence", True),
    ("lift", True),
    ("p-value", True),
    ("window", False),
)


def _events(data: dict[str, Any]) -> str:
    events = data["events"]
    if not events:
        return "<h2>Events</h2><p>No pattern emerged or faded.</p>"
    head = "".join(f'<th class="{"n" if num else ""}">{escape(name)}</th>' for name, num in EVENT_COLUMNS)
    rows = [_event_row(event) for event in events]
    left_out = data["detector"]["events_left_out"]
    more = f'<p class="note">{left_out:,} later events are counted but not listed.</p>' if left_out else ""
    return (
        f'<h2>Events</h2><p class="note">{len(events):,} events; click a heading to sort.</p>'
        f'<table class="sortable" id="events"><thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(rows)}</tbody></table>{more}"
    )


def _event_row(event: dict[str, Any]) -> str:
    rules = event["rules"]
    confidence = max((r["confidence"] for r in rules), default=None)
    lift = max((r["lift"] for r in rules), default=None)
    window = event["window"]
    where = window["last_id"] or ""
    if window["end_time"] is not None:
        where = f"{_utc(window['end_time'])} UTC" + (f" ({where})" if where else "")
    cells = [
        (event["tick"], f"{event['tick']:,}"),
        (event["baskets"], f"{event['baskets']:,}"),
        (event["event"], event["event"]),
        (" + ".join(event["items"]), " + ".join(event["items"])),
        (event["support"], f"{100 * event['support']:.2f}%"),
        (event["baseline"]["support"], f"{100 * event['baseline']['support']:.2f}%"),
        (confidence, "" if confidence is None else f"{confidence:.3f}"),
        (lift, "" if lift is None else f"{lift:.2f}"),
        (event["p_value"], f"{event['p_value']:.2g}"),
        (where, where),
    ]
    tds = []
    for (name, numeric), (value, shown) in zip(EVENT_COLUMNS, cells, strict=True):
        sort = ("" if value is None else repr(value)) if numeric else str(value)
        css = ' class="n"' if numeric else f' class="{escape(shown)}"' if name == "event" else ""
        tds.append(f'<td{css} data-v="{escape(sort)}">{escape(shown)}</td>')
    return f"<tr>{''.join(tds)}</tr>"


def _detector(data: dict[str, Any]) -> str:
    d = data["detector"]
    states = d["patterns_at_end"]
    rows = [
        ("emerged events", f"{d['emerged']:,}"),
        ("faded events", f"{d['faded']:,}"),
        ("events per 1,000 baskets", _maybe(d["events_per_1000_baskets"], "{:.3f}")),
        ("events per day of event time", _maybe(d["events_per_day"], "{:.2f}")),
        ("patterns at the end", ", ".join(f"{n:,} {state}" for state, n in states.items())),
    ]
    return "<h2>Detector</h2>" + _table(rows)


def _throughput(data: dict[str, Any]) -> str:
    run = data["run"]
    t = run["tick_seconds"]
    rows = [
        ("baskets read", f"{run['baskets']:,}"),
        ("ticks", f"{run['ticks']:,}"),
        ("wall time", f"{run['wall_seconds']:.2f} s"),
        ("baskets a second (read, windowed, mined, tested)", _maybe(run["baskets_per_second"], "{:,.0f}")),
        ("window at the end", _maybe(run["window_at_end"], "{:,} baskets")),
        ("frequent itemsets at the end", _maybe(run["itemsets_at_end"], "{:,}")),
        (
            "tick time (window update and refresh)",
            "n/a"
            if t["mean"] is None
            else f"mean {1e3 * t['mean']:.1f} ms, median {1e3 * t['median']:.1f} ms, "
            f"90th percentile {1e3 * t['p90']:.1f} ms, max {1e3 * t['max']:.1f} ms",
        ),
        ("duplicates skipped", f"{run['duplicates_skipped']:,}"),
        ("dropped as too late", f"{run['dropped_late']:,}"),
        ("set aside", ", ".join(f"{n:,} {why}" for why, n in run["set_aside"].items()) or "none"),
    ]
    if run["window_end_time"] is not None:
        rows.insert(5, ("window end (event time)", f"{_utc(run['window_end_time'])} UTC"))
    timeline = data["timeline"]
    columns = timeline["columns"]
    at, seconds = columns.index("baskets"), columns.index("seconds")
    points = [(float(row[at]), 1e3 * row[seconds]) for row in timeline["rows"]]
    chart = line_chart([Line("tick time", PALETTE[0], [points])], [], y_label="tick ms") if points else ""
    return "<h2>Window and throughput</h2>" + _table(rows) + chart


def _table(rows: list[tuple[str, str]]) -> str:
    body = "".join(f"<tr><th>{escape(name)}</th><td>{escape(value)}</td></tr>" for name, value in rows)
    return f"<table>{body}</table>"


def _maybe(value: float | None, form: str) -> str:
    return "n/a" if value is None else form.format(value)


def _value(value: object) -> str:
    if isinstance(value, list):
        return ", ".join(map(str, value))
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def _utc(seconds: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M:%S", time.gmtime(seconds))
