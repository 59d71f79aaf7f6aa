// If (opsets 1-19): run then_branch or else_branch, which see the enclosing scope's values, and pass the
// branch outputs through.
import { attrGraph } from '../../graph/ir.js';
import { badModel, need } from '../attrs.js';
import type { Kernel } from '../value.js';

export const If: Kernel = {
  op: 'If', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const cond = need(inputs, 0, ctx, 'cond');
    if (cond.data.length !== 1) throw badModel(ctx, `cond has ${cond.data.length} elements; it must hold exactly one`);
    const which = cond.data[0] !== 0 ? 'then_branch' : 'else_branch';
    const g = attrGraph(ctx.node, which);
    if (!g) throw badModel(ctx, `attribute ${which} is missing`);
    const outs = ctx.runSubgraph(g);
    if (outs.length !== ctx.node.outputs.length) {
      throw badModel(ctx, `${which} has ${outs.length} outputs but the node has ${ctx.node.outputs.length}`);
    }
    return outs;
  },
};
