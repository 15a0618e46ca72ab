"""The report page's style sheet: system fonts, black on white, borders rather than
fills, a page break before each major section in print."""

CSS = """
:root { color-scheme: light; }
html { background: #fff; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans",
  "Liberation Sans", "Helvetica Neue", Arial, sans-serif; font-size: 15px;
  line-height: 1.45; color: #111; background: #fff; max-width: 62rem; margin: 0 auto;
  padding: 1.2rem 1.5rem 2rem; }
h1 { font-size: 1.75rem; margin: .2rem 0 .3rem; }
h2 { font-size: 1.35rem; border-bottom: 2px solid #222; padding-bottom: .15rem;
  margin: 2.4rem 0 .8rem; }
h3 { font-size: 1.05rem; margin: 1.3rem 0 .4rem; }
p, li { max-width: 52rem; }
.meta { font-size: .88rem; color: #222; }
.note { font-size: .88rem; color: #333; }
.wide { overflow-x: auto; }
table { border-collapse: collapse; margin: .4rem 0 1.1rem; font-size: .86rem; }
caption { caption-side: top; text-align: left; font-weight: 600; padding: .2rem 0; }
th, td { border: 1px solid #888; padding: .18rem .45rem; vertical-align: top; }
th { background: #f2f2f2; text-align: left; font-weight: 600; }
td.num { text-align: right; white-space: nowrap; font-variant-numeric: tabular-nums; }
tr.lead td, tr.lead th { font-weight: 700; }
figure { margin: 1rem 0 1.3rem; break-inside: avoid; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid #bbb; }
figcaption { font-size: .86rem; color: #222; margin-top: .3rem; }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(12.5rem, 1fr));
  gap: .6rem; margin: .6rem 0 1rem; }
.card { border: 2px solid #222; padding: .45rem .7rem; }
.card .value { display: block; font-size: 1.65rem; font-weight: 700; }
.card .label { display: block; font-size: .86rem; }
.caution { border: 3px double #000; padding: .6rem .9rem; margin: 1rem 0; }
code { font-family: ui-monospace, "DejaVu Sans Mono", "Liberation Mono", Menlo, Consolas,
  monospace; font-size: .86em; overflow-wrap: anywhere; }
table.fixed { table-layout: fixed; width: 100%; }
table.fixed td { overflow-wrap: anywhere; }
td.unit, td.nowrap { white-space: nowrap; }
.end-text { margin-top: 2rem; font-size: .88rem; }
hr.end { border: 0; border-top: 6px solid #000; margin: .3rem 0 0; }
.lede { margin: .35rem 0; }
dl.facts { margin: .3rem 0; }
dl.facts dt { font-weight: 700; float: left; clear: left; margin-right: .4rem; }
dl.facts dd { margin: 0 0 .2rem 0; }
#summary h2 { margin-top: 1.2rem; }
#summary table { margin: .3rem 0 .5rem; }
#summary .caution { margin: .5rem 0; padding: .3rem .7rem; }
#summary ul, #summary ol { margin: .2rem 0; }
@page { size: A4; margin: 15mm 13mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  section.major { break-before: page; }
  section#summary { break-after: page; font-size: 9pt; line-height: 1.3; }
  #summary table { font-size: 8pt; margin: 2pt 0 4pt; }
  #summary h2 { margin: 4pt 0 4pt; font-size: 13pt; }
  #summary p, #summary dl, #summary .caution { margin: 3pt 0; }
  #summary li { margin: 0; }
  header h1 { font-size: 15pt; margin: 0 0 2pt; }
  header p { margin: 2pt 0; }
  h2, h3, caption { break-after: avoid; }
  tr, figure, .card { break-inside: avoid; }
  th { background: #fff; }
  table { font-size: 8pt; }
  th, td { padding: 1px 3px; }
  .wide { overflow: visible; }
}
"""

