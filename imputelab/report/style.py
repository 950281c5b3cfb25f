"""The report's style sheet and Content-Security-Policy (inline: the page fetches nothing)."""

from __future__ import annotations

__all__ = ["CSP", "CSS"]

CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"

CSS = """
:root{--ink:#22262e;--muted:#585e6b;--paper:#f8f7f2;--sheet:#fff;--rule:#d5d7dc;
--accent:#0072B2;--warm:#D55E00;--mark:#E69F00}
*{box-sizing:border-box}
html{background:var(--paper);color:var(--ink)}
body{margin:0 auto;max-width:60rem;padding:2rem 1.5rem 4rem;
font:16px/1.55 "Iowan Old Style","Palatino Linotype",Palatino,"Book Antiqua",Georgia,serif}
h1,h2,h3,nav,table,dl,figcaption,.strip,.tag,.small,footer,.kicker{
font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
header.mast{border-top:7px solid var(--ink);border-bottom:1px solid var(--ink);
padding:.9rem 0 .8rem;margin-bottom:1.2rem}
.kicker{text-transform:uppercase;letter-spacing:.16em;font-size:.72rem;color:var(--muted)}
h1{font-size:2.05rem;line-height:1.15;margin:.25rem 0 .35rem}
h1 code{font-size:.85em}
.lede{margin:0;color:var(--muted)}
nav.toc{display:flex;flex-wrap:wrap;gap:.4rem 1.2rem;font-size:.86rem;margin:0 0 1.5rem;
padding:.55rem 0;border-bottom:1px solid var(--rule)}
nav.toc a{color:var(--ink);text-decoration:none;border-bottom:1px dotted var(--muted)}
section{margin-top:2.6rem}
h2{font-size:1.5rem;margin:0 0 1rem;display:flex;align-items:center;gap:.7rem;
padding-bottom:.4rem;border-bottom:2px solid var(--ink)}
h2 .no{display:inline-flex;align-items:center;justify-content:center;width:2.1rem;
height:2.1rem;border:2px solid var(--ink);border-radius:50%;font-size:1.05rem;
font-variant-numeric:tabular-nums;flex:none}
h3{font-size:1.08rem;margin:1.6rem 0 .5rem}
h3 .kind{font-weight:400;font-size:.8rem;color:var(--muted);border:1px solid var(--rule);
border-radius:3px;padding:0 .35rem;margin-left:.3rem;vertical-align:middle}
code{font-family:ui-monospace,"SF Mono",Menlo,Consolas,"DejaVu Sans Mono",monospace;
font-size:.88em;background:#ecebe4;padding:.05em .3em;border-radius:3px}
.strip{display:grid;grid-template-columns:repeat(auto-fit,minmax(8.5rem,1fr));gap:0;
border:1px solid var(--ink);background:var(--sheet);margin:1rem 0}
.stat{padding:.6rem .8rem;border-right:1px solid var(--rule);display:flex;flex-direction:column}
.stat:last-child{border-right:none}
.stat .big{font-size:1.45rem;font-weight:650;font-variant-numeric:tabular-nums}
.stat .small{color:var(--muted)}
.small{font-size:.82rem;color:var(--muted)}
table{border-collapse:collapse;width:100%;font-size:.84rem;margin:.5rem 0 1rem;
background:var(--sheet)}
table.narrow{width:auto;min-width:18rem}
th{text-align:left;font-weight:650;border-bottom:1.5px solid var(--ink);padding:.35rem .55rem}
td{border-bottom:1px solid var(--rule);padding:.3rem .55rem;vertical-align:top}
.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.act{font-weight:600}
.act-drop{text-decoration:line-through;text-decoration-thickness:1.5px}
.act-exclude{font-style:italic;font-weight:400}
dl.settings{display:grid;grid-template-columns:minmax(10rem,16rem) 1fr;gap:.25rem 1rem;
font-size:.86rem;margin:.5rem 0 1rem}
dl.settings dt{color:var(--muted)}
dl.settings dd{margin:0}
figure.chart{margin:.8rem 0 1rem;padding:.8rem .8rem .5rem;background:var(--sheet);
border:1px solid var(--rule);border-left:4px solid var(--accent)}
figure.chart svg{display:block;width:100%;height:auto}
figcaption{font-size:.8rem;color:var(--muted);margin-top:.4rem}
article.column{margin:1.4rem 0 2rem;padding-top:.2rem;border-top:1px dashed var(--rule)}
.why{margin:.4rem 0 .6rem}
.tag{display:inline-block;font-size:.7rem;font-weight:650;text-transform:uppercase;
letter-spacing:.08em;border:1.5px solid var(--ink);border-radius:2px;padding:0 .35rem;
margin-right:.2rem;background:#fff3d6}
.note{border-left:4px solid var(--warm);background:var(--sheet);padding:.6rem .9rem;
margin:1rem 0}
.note ul{margin:.3rem 0 0}
ol.cautions li{margin:.45rem 0}
footer{margin-top:3rem;padding-top:.6rem;border-top:1px solid var(--ink);font-size:.78rem;
color:var(--muted)}
@media print{
html,body{background:#fff}
body{max-width:none;padding:0;font-size:10.5pt}
nav.toc{display:none}
section{break-before:page;margin-top:0}
section:first-of-type{break-before:auto}
figure,table,.strip,.note,dl{break-inside:avoid}
tr{break-inside:avoid}
h2,h3{break-after:avoid}
figure.chart{border-left-width:2px}
.strip{grid-template-columns:repeat(3,1fr)}
.stat{border-bottom:1px solid var(--rule)}
code{background:none;padding:0}
}
@page{size:A4;margin:14mm 13mm 16mm}
"""
