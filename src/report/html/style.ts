// The page's own stylesheet (inline; no fonts or files from anywhere). Status is carried by a word and a shape;
// colour only repeats it. Sizes are in rem so the page reflows at 200% zoom; print drops backgrounds.
export const CSS = `
:root{--paper:#f7f5f0;--card:#fffdf8;--ink:#1e2328;--muted:#535b66;--line:#cbc4b4;--folded:#1d6b5a;--foldable:#2b5c88;
--kept:#87560f;--failed:#9e2626;--focus:#5a3d8e;--bar:#3d6f8f;--band:#b58b3a}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:1rem/1.45 system-ui,-apple-system,"Segoe UI",sans-serif}
main{max-width:72rem;margin:0 auto;padding:1rem 1.25rem 3rem}
h1{font-size:1.5rem;margin:.5rem 0 .25rem}h2{font-size:1.2rem;margin:2rem 0 .5rem;border-bottom:2px solid var(--line);padding-bottom:.2rem}
h3{font-size:1rem;margin:0 0 .4rem}
code,.mono{font-family:ui-monospace,"DejaVu Sans Mono",monospace;font-size:.9em;overflow-wrap:anywhere}
a{color:var(--foldable)}a:focus-visible,.card:focus-visible,summary:focus-visible{outline:3px solid var(--focus);outline-offset:3px}
.sub{color:var(--muted);margin:0 0 1rem}
.tiles{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(100%,15rem),1fr));gap:.75rem;margin:0;padding:0}
.tile{background:var(--card);border:1px solid var(--line);border-left:5px solid var(--muted);padding:.5rem .75rem;border-radius:4px}
.tile dt{font-size:.8rem;text-transform:uppercase;letter-spacing:.04em;color:var(--muted)}.tile dd{margin:.15rem 0 0}
.badge{display:inline-block;font-weight:600;padding:0 .4rem;border:1.5px solid currentColor;border-radius:3px;white-space:nowrap}
.s-folded,.s-passed,.s-equalized{color:var(--folded)}.s-foldable{color:var(--foldable)}.s-kept,.s-skipped,.s-refused{color:var(--kept)}.s-failed{color:var(--failed)}
.scroll{overflow-x:auto}
table{border-collapse:collapse;width:100%;background:var(--card)}th,td{text-align:left;padding:.3rem .5rem;border-bottom:1px solid var(--line);vertical-align:top}
th{font-size:.85rem;color:var(--muted)}tr:target{outline:3px solid var(--focus)}
.cards{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(100%,30rem),1fr));gap:1rem}
.card{background:var(--card);border:1px solid var(--line);border-top:5px solid var(--muted);border-radius:4px;padding:.75rem;min-width:0}
.card.s-folded{border-top-color:var(--folded)}.card.s-foldable{border-top-color:var(--foldable)}.card.s-kept{border-top-color:var(--kept)}
.card:target{box-shadow:0 0 0 3px var(--focus)}.card dl{display:grid;grid-template-columns:max-content 1fr;gap:.1rem .75rem;margin:.25rem 0 .5rem}
.card dt{color:var(--muted)}.card dd{margin:0;min-width:0}
.card,.card .badge{color:var(--ink)}.card .badge.s-folded{color:var(--folded)}.card .badge.s-foldable{color:var(--foldable)}.card .badge.s-kept{color:var(--kept)}
figure{margin:.5rem 0}figcaption{font-size:.85rem;color:var(--muted)}
svg{max-width:100%;height:auto;display:block}.plot{width:100%;max-width:44rem}
.sketch .node rect{fill:#fff;stroke:var(--muted);stroke-width:1.2}.sketch .role-norm rect{stroke:var(--kept);stroke-width:3.5}
.sketch .role-target rect{stroke:var(--folded);stroke-width:1.5}.sketch .padded rect{stroke-dasharray:5 3}
.sketch text{font:12px ui-monospace,"DejaVu Sans Mono",monospace;text-anchor:middle;fill:var(--ink)}.sketch text.op{font-weight:700}
.sketch text.pad{fill:var(--failed)}.edge{fill:none;stroke:var(--muted);stroke-width:1.3}.arrowhead{fill:var(--muted)}
.pair{display:flex;flex-wrap:wrap;gap:1rem;align-items:flex-start}.pair figure{flex:1 1 12rem;min-width:0}
.plot text{font:11px system-ui,sans-serif;fill:var(--ink)}.plot .tick{text-anchor:middle;fill:var(--muted)}.plot .tick.end{text-anchor:end}
.plot .name{text-anchor:end;font-family:ui-monospace,monospace}.plot .grid{stroke:#e2ddd2}.plot .axis{stroke:var(--ink)}
.plot .limit{stroke:var(--failed);stroke-width:1.5;stroke-dasharray:6 3}.plot .limit-label{fill:var(--failed)}
.plot .before{fill:#fff;stroke:var(--ink);stroke-width:1.5}.plot .after{fill:var(--ink)}.plot .move{stroke:var(--muted);stroke-width:1.5}
.plot .flagged .after{fill:var(--failed)}.plot .flag{fill:var(--failed);font-weight:700}.plot .bar{fill:var(--bar)}
.plot .hatch{stroke:var(--band);stroke-width:2}.plot .band{opacity:.5}
details{margin-top:1rem}summary{cursor:pointer;font-weight:600}
.legend{font-size:.85rem;color:var(--muted)}.caution{border-left:4px solid var(--kept);padding:.25rem .75rem;background:var(--card)}
@media print{body{background:#fff}main{max-width:none;padding:0}.card,.tile,table{background:#fff;break-inside:avoid}
a{color:var(--ink);text-decoration:none}.back{display:none}}
`;
