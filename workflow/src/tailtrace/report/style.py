"""The report's style sheet, inlined into the page (no external resources)."""

from __future__ import annotations

__all__ = ["CSS"]

# Neutral greys with one slate accent; status tints are pale with dark text
# (contrast above 7:1) and every status is also written out in words.
CSS = """
:root { --ink:#1f2933; --muted:#52606d; --rule:#cbd2d9; --pale:#f4f6f8; --accent:#2f5d7c;
  --bad:#8e1b1b; --bad-bg:#fbeaea; --warn:#6b4300; --warn-bg:#fdf1dc; --good:#1d5433; --good-bg:#e5f2ea;
  --none:#3e4c59; --none-bg:#e9edf1; }
* { box-sizing: border-box; }
html { color: var(--ink); background: #fff; }
body { font: 15px/1.45 system-ui, "Segoe UI", "Helvetica Neue", Arial, "DejaVu Sans", sans-serif;
  margin: 0 auto; max-width: 1180px; padding: 24px 28px 40px; }
h1 { font-size: 1.6rem; margin: 0 0 .2rem; letter-spacing: -.01em; }
h2 { font-size: 1.2rem; margin: 2.2rem 0 .6rem; padding-bottom: .25rem; border-bottom: 2px solid var(--ink); }
h3 { font-size: 1rem; margin: 1.4rem 0 .4rem; }
p { margin: .4rem 0 .7rem; max-width: 78ch; }
.meta { color: var(--muted); margin: 0; }
.meta strong { color: var(--ink); }
header.page { border-bottom: 1px solid var(--rule); padding-bottom: .8rem; }
nav.toc { margin: .8rem 0 0; font-size: .9rem; }
nav.toc ol { list-style: none; padding: 0; margin: 0; display: flex; flex-wrap: wrap; gap: .3rem 1.1rem; }
nav.toc a { color: var(--accent); }
a { color: var(--accent); }
.notice { border: 1px solid var(--rule); border-left: 6px solid var(--none); background: var(--none-bg);
  padding: .6rem .9rem; margin: .6rem 0; max-width: none; }
.banner { border: 1px solid; border-left-width: 8px; padding: .7rem 1rem; margin: .8rem 0 1rem; }
.banner p { margin: .2rem 0; max-width: none; }
.banner-title { font-size: 1.1rem; font-weight: 700; }
.banner-breach { border-color: var(--bad); background: var(--bad-bg); color: var(--bad); }
.banner-near { border-color: var(--warn); background: var(--warn-bg); color: var(--warn); }
.banner-clear { border-color: var(--good); background: var(--good-bg); color: var(--good); }
.table-wrap { overflow-x: auto; margin: .4rem 0 1rem; }
table { border-collapse: collapse; font-size: .88rem; font-variant-numeric: tabular-nums; }
caption { caption-side: top; text-align: left; font-weight: 600; padding: .2rem 0 .4rem; }
caption .sub { font-weight: 400; color: var(--muted); }
th, td { padding: .3rem .55rem; border-bottom: 1px solid var(--rule); vertical-align: top; }
thead th { vertical-align: bottom; text-align: left; border-bottom: 2px solid var(--ink); background: var(--pale); }
tbody th { text-align: left; font-weight: 600; }
tbody tr:nth-child(even) { background: #fafbfc; }
td.num, th.num { text-align: right; }
td.num { white-space: nowrap; }
th.headline, td.headline { background: #eef3f7; font-weight: 700; }
thead th .sub { display: block; font-weight: 400; font-size: .78rem; color: var(--muted); }
td.date { white-space: nowrap; }
table.headline-table { font-size: .84rem; }
table.headline-table tbody th { white-space: nowrap; }
.hz { color: var(--muted); font-weight: 400; }
tr.group > * { border-top: 2px solid var(--ink); }
.vh { position: absolute; width: 1px; height: 1px; overflow: hidden; clip: rect(0 0 0 0); white-space: nowrap; }
td.na { color: var(--muted); text-align: right; }
abbr { text-decoration: none; border-bottom: 1px dotted var(--muted); cursor: help; }
.scl { font-size: .72rem; color: var(--muted); margin-left: .25rem; }
.tag { display: inline-block; padding: .05rem .45rem; border: 1px solid; border-radius: 3px; font-size: .8rem;
  font-weight: 700; white-space: nowrap; }
.tag-breach, .zone-red, .sev-error { color: var(--bad); background: var(--bad-bg); border-color: var(--bad); }
.tag-near, .zone-yellow, .sev-warning { color: var(--warn); background: var(--warn-bg); border-color: var(--warn); }
.tag-ok, .zone-green { color: var(--good); background: var(--good-bg); border-color: var(--good); }
.tag-missing, .zone-unknown, .sev-info, .sev-other { color: var(--none); background: var(--none-bg);
  border-color: var(--none); }
.gauge { display: inline-block; width: 70px; height: .6rem; margin-left: .4rem; vertical-align: middle;
  background: var(--pale); border: 1px solid var(--rule); position: relative; }
.gauge > span { position: absolute; left: 0; top: 0; bottom: 0; background: var(--accent); }
.gauge.over > span { background: var(--bad); }
.flag { font-weight: 700; }
figure { margin: 1rem 0 1.6rem; }
figure img { display: block; width: 100%; max-width: 900px; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: .88rem; margin-top: .35rem; max-width: 900px; }
ul.cautions li { margin: .35rem 0; max-width: 82ch; }
footer { margin-top: 2.4rem; padding-top: .6rem; border-top: 1px solid var(--rule); color: var(--muted);
  font-size: .85rem; }
footer dl { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem; margin: 0; }
footer dt { font-weight: 600; color: var(--ink); }
footer dd { margin: 0; word-break: break-all; }
@media print {
  @page { size: A4; margin: 12mm 11mm; }
  body { font-size: 9.5pt; max-width: none; padding: 0; }
  nav.toc { display: none; }
  h2 { break-after: avoid; page-break-after: avoid; }
  table, figure, .banner { break-inside: avoid; page-break-inside: avoid; }
  h3, caption { break-after: avoid; page-break-after: avoid; }
  .table-wrap { overflow: visible; }
  table { font-size: 7.8pt; }
  th, td { padding: .15rem .35rem; }
  thead { display: table-header-group; }
  a { color: inherit; text-decoration: none; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  figure img { max-width: 100%; }
}
"""
