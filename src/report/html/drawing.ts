// A sketch of a normalization's neighbourhood as inline SVG. Placement comes from dagre (a layered graph
// layout library), run here at render time; the page receives only the finished SVG. Node boxes are sized
// from the label length in a monospace font, so the same sketch always gives the same bytes.
import dagre from '@dagrejs/dagre';
import type { SketchView } from '../../fold/sketch.js';
import { esc } from './escape.js';

const CHAR = 7.3; // width of one character of 12px monospace, rounded up
const LINE = 15;
const PAD = 8;

const fx = (x: number) => (Math.round(x * 10) / 10).toString();

function label(n: SketchView['nodes'][number]): string[] {
  const lines = [n.op, n.id];
  if (n.padded) lines.push('pads input');
  return lines;
}

/** The SVG of one view; `key` makes the ids inside it unique on the page. */
export function drawView(view: SketchView, key: string, caption: string): string {
  const g = new dagre.graphlib.Graph({ multigraph: true });
  g.setGraph({ rankdir: 'TB', nodesep: 18, ranksep: 30, marginx: 6, marginy: 6 });
  g.setDefaultEdgeLabel(() => ({}));
  for (const n of view.nodes) {
    const lines = label(n);
    g.setNode(n.id, { width: Math.ceil(Math.max(...lines.map((l) => l.length)) * CHAR + 2 * PAD), height: lines.length * LINE + 2 * PAD - 2 });
  }
  view.edges.forEach((e, i) => g.setEdge(e.from, e.to, {}, `${i}`));
  dagre.layout(g);
  const { width = 0, height = 0 } = g.graph();
  const marker = `arrow-${key}`;
  const parts: string[] = [];
  parts.push(`<svg class="sketch" viewBox="0 0 ${fx(width)} ${fx(height)}" width="${fx(width)}" role="img" aria-labelledby="${key}-t">`);
  parts.push(`<title id="${key}-t">${esc(caption)}</title>`);
  parts.push(`<defs><marker id="${marker}" viewBox="0 0 8 8" refX="8" refY="4" markerWidth="7" markerHeight="7" orient="auto"><path d="M0,0L8,4L0,8z" class="arrowhead"/></marker></defs>`);
  view.edges.forEach((e, i) => {
    const pts: Array<{ x: number; y: number }> = g.edge({ v: e.from, w: e.to, name: `${i}` })?.points ?? [];
    if (pts.length < 2) return;
    const d = pts.map((p, j) => `${j ? 'L' : 'M'}${fx(p.x)},${fx(p.y)}`).join('');
    parts.push(`<path class="edge" d="${d}" marker-end="url(#${marker})"><title>${esc(e.value)}</title></path>`);
  });
  for (const n of view.nodes) {
    const p = g.node(n.id);
    const x = p.x - p.width / 2, y = p.y - p.height / 2;
    const cls = `node role-${n.role}${n.padded ? ' padded' : ''}`;
    parts.push(`<g class="${cls}"><rect x="${fx(x)}" y="${fx(y)}" width="${fx(p.width)}" height="${fx(p.height)}" rx="4"/>`);
    if (n.role === 'target') parts.push(`<rect class="inner" x="${fx(x + 3)}" y="${fx(y + 3)}" width="${fx(p.width - 6)}" height="${fx(p.height - 6)}" rx="2"/>`);
    label(n).forEach((l, j) => {
      parts.push(`<text x="${fx(p.x)}" y="${fx(y + PAD + 11 + j * LINE)}" class="${j === 0 ? 'op' : j === 1 ? 'id' : 'pad'}">${esc(l)}</text>`);
    });
    parts.push('</g>');
  }
  parts.push('</svg>');
  return parts.join('');
}
