// DepthToSpace (opsets 1, 11 with `mode`, 13) and SpaceToDepth (opsets 1, 13) on N x C x H x W. With block b,
// DepthToSpace moves channel groups into b x b spatial blocks: DCR mode (the default) reads output
// (c, h*b+i, w*b+j) from channel (i*b + j) * C/b^2 + c, CRD mode from channel c*b^2 + i*b + j (ONNX docs'
// reshape/transpose definitions). SpaceToDepth is the inverse of DCR.
import { attrInt, attrString } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, badModel, need, unsupported } from './common.js';

function dims4(x: Value, ctx: KernelContext): [number, number, number, number, number] {
  if (x.dims.length !== 4) throw badModel(ctx, `input has rank ${x.dims.length}; expected N x C x H x W`);
  const b = attrInt(ctx.node, 'blocksize');
  if (!b || b < 1) throw badModel(ctx, 'attribute blocksize is missing or not positive');
  const [N, C, H, W] = x.dims as [number, number, number, number];
  return [N, C, H, W, b];
}

export const DepthToSpace: Kernel = {
  op: 'DepthToSpace', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const [N, C, H, W, b] = dims4(x, ctx);
    const mode = ctx.opset >= 11 ? attrString(ctx.node, 'mode', 'DCR') : 'DCR';
    if (mode !== 'DCR' && mode !== 'CRD') throw unsupported(ctx, `mode '${mode}'`);
    if (C % (b * b) !== 0) throw badModel(ctx, `channels ${C} are not divisible by blocksize^2 = ${b * b}`);
    const Co = C / (b * b), Ho = H * b, Wo = W * b;
    const out = alloc(x.type, x.data.length, ctx, false);
    let w = 0;
    for (let n = 0; n < N; n++) {
      for (let c = 0; c < Co; c++) {
        for (let oh = 0; oh < Ho; oh++) {
          const h = Math.floor(oh / b), i = oh % b;
          for (let ow = 0; ow < Wo; ow++) {
            const wi = Math.floor(ow / b), j = ow % b;
            const ic = mode === 'DCR' ? (i * b + j) * Co + c : c * b * b + i * b + j;
            out[w++] = x.data[((n * C + ic) * H + h) * W + wi]!;
          }
        }
      }
    }
    return [{ type: x.type, dims: [N, Co, Ho, Wo], data: out }];
  },
};

export const SpaceToDepth: Kernel = {
  op: 'SpaceToDepth', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const [N, C, H, W, b] = dims4(x, ctx);
    if (H % b !== 0 || W % b !== 0) throw badModel(ctx, `spatial dims ${H} x ${W} are not divisible by blocksize ${b}`);
    const Ho = H / b, Wo = W / b, Co = C * b * b;
    const out = alloc(x.type, x.data.length, ctx, false);
    let w = 0;
    for (let n = 0; n < N; n++) {
      for (let oc = 0; oc < Co; oc++) {
        const blk = Math.floor(oc / C), c = oc % C, i = Math.floor(blk / b), j = blk % b;
        for (let oh = 0; oh < Ho; oh++) {
          for (let ow = 0; ow < Wo; ow++) out[w++] = x.data[((n * C + c) * H + oh * b + i) * W + ow * b + j]!;
        }
      }
    }
    return [{ type: x.type, dims: [N, Co, Ho, Wo], data: out }];
  },
};
