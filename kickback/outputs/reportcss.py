"""The report's style sheet (one page, screen and print) and its verdict colours."""

from __future__ import annotations

#: banner colours by verdict (also detected in the rendered page by the tests)
VERDICT_COLOURS = {"pass": "#1e7b34", "fail": "#b3261e", "unchecked": "#8a6d00"}

CSS = (":root { " + "".join(f"--{k}: {v}; " for k, v in VERDICT_COLOURS.items())
       + "--ink: #1b1b1b; --rule: #c9c9c9; }" + """
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; color: var(--ink); margin: 0 auto;
       max-width: 1080px; padding: 18px 24px 40px; font-size: 14px; line-height: 1.45; background: #fff; }
h1 { font-size: 22px; margin: 4px 0 10px; }
h2 { font-size: 17px; border-bottom: 2px solid var(--ink); padding-bottom: 3px; margin: 30px 0 10px; }
h3 { font-size: 14.5px; margin: 16px 0 6px; }
.kicker { font-size: 12px; letter-spacing: .06em; text-transform: uppercase; color: #555; }
.banner { display: flex; gap: 18px; align-items: center; padding: 12px 18px; border: 3px solid var(--ink);
          color: #fff; border-radius: 4px; -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.banner.pass { background: var(--pass); } .banner.fail { background: var(--fail); }
.banner.unchecked { background: var(--unchecked); }
.banner .word { font-size: 30px; font-weight: 800; letter-spacing: .04em; white-space: nowrap; }
.banner .line { font-size: 15px; }
ul.findings li { margin: 2px 0; }
nav.toc { font-size: 13px; margin: 12px 0 0; columns: 2; }
nav.toc a { color: inherit; }
table { border-collapse: collapse; margin: 6px 0 10px; font-size: 13px; }
th, td { border-bottom: 1px solid var(--rule); padding: 3px 10px 3px 6px; text-align: left; vertical-align: top; }
th { border-bottom: 2px solid var(--ink); font-weight: 700; }
td:nth-child(n+2) { font-variant-numeric: tabular-nums; }
tr.group td { border-top: 1.5px solid #777; } tr.group td:first-child { font-weight: 700; }
table.figures td:first-child { white-space: pre; }
.cards { display: grid; grid-template-columns: repeat(auto-fill, minmax(400px, 1fr)); gap: 10px 16px;
         align-items: start; }
.card { border: 1px solid var(--rule); border-radius: 4px; padding: 4px 8px 2px; break-inside: avoid; min-width: 0; }
.card h4 { margin: 2px 0 0; font-size: 13px; font-family: "DejaVu Sans Mono", monospace; }
table.kv { width: 100%; margin: 2px 0 4px; font-size: 12.5px; }
table.kv td { padding: 2px 6px 2px 0; overflow-wrap: anywhere; }
table.kv td:first-child { font-family: "DejaVu Sans Mono", monospace; font-size: 11.5px; }
table.kv td:nth-child(2) { font-weight: 600; }
table.kv td:nth-child(3) { color: #555; font-size: 11.5px; }
table.kv tr.sub td { font-weight: 700; border-bottom: 1.5px solid #777; padding-top: 6px; font-family: inherit; }
figure.ledger svg { max-width: 700px; }
table.checks tr.fail td { font-weight: 700; background: #fbe9e7; }
table.checks tr.fail td:first-child { border-left: 5px solid var(--fail); }
table.checks tr.pass td:first-child { border-left: 5px solid var(--pass); }
.mark { white-space: nowrap; font-weight: 700; } .mark.pass { color: var(--pass); } .mark.fail { color: var(--fail); }
figure { margin: 8px 0 14px; } figure svg { width: 100%; height: auto; display: block; }
figcaption { font-size: 12.5px; color: #333; margin-top: 4px; }
figure.schematic svg { width: auto; max-width: 100%; max-height: 600px; margin: 0 auto; }
figure.wave.single svg { max-width: 1000px; }
table.compare td { white-space: nowrap; }
table.worst td:nth-child(-n+3) { white-space: nowrap; }
table.compare td:first-child, table.compare td:last-child { white-space: normal; }
pre.case { background: #f6f6f6; border: 1px solid var(--rule); padding: 8px 10px; font-size: 12px;
           white-space: pre-wrap; overflow-wrap: anywhere; }
.caution { border: 2px solid var(--ink); padding: 10px 14px; background: #fff8e1; }
.note { font-size: 12.5px; color: #333; }
code { font-size: 12.5px; }
@page { size: A4; margin: 13mm 12mm 14mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  h2 { margin-top: 0; }
  section.page { break-before: page; }
  nav.toc { display: none; }
  figure, table, tr, .banner, .caution, pre.case { break-inside: avoid; }
  pre.case { break-inside: auto; }
  a { color: inherit; text-decoration: none; }
  figure.schematic svg { max-height: 150mm; }
  table.checks tr.fail td { background: none; }
}
""")
