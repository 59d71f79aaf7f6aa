// RoiAlign (opsets 10, 16): for each region (x1, y1, x2, y2 in `rois`, image `batch_indices`), an
// output_height x output_width grid of bins (defaults 1 x 1), each the average (mode avg, the default) or max of
// bilinear samples on a sampling_ratio x sampling_ratio grid (0: ceil(bin size) per axis), after scaling the
// region by spatial_scale (default 1). coordinate_transformation_mode (opset 16, default half_pixel) shifts the
// region by -0.5 pixel; output_half_pixel (opset 10's only behaviour) does not, and widens regions to at least
// one pixel. Sampling follows the ONNX reference implementation and onnxruntime: samples more than one pixel
// outside contribute 0, others are clamped to the border; max mode takes the largest weighted corner value.
import { attrFloat, attrInt, attrString } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need, unsupported } from './common.js';

export const RoiAlign: Kernel = {
  op: 'RoiAlign', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), rois = need(inputs, 1, ctx), bi = need(inputs, 2, ctx);
    if (x.dims.length !== 4) throw badModel(ctx, `input X has rank ${x.dims.length}; expected N x C x H x W`);
    const [N, C, H, W] = x.dims as [number, number, number, number];
    const R = rois.dims[0]!;
    if (rois.dims.length !== 2 || rois.dims[1] !== 4 || bi.data.length !== R) throw badModel(ctx, `rois [${rois.dims}] and batch_indices [${bi.dims}] do not match`);
    const mode = attrString(ctx.node, 'mode', 'avg');
    if (mode !== 'avg' && mode !== 'max') throw unsupported(ctx, `mode '${mode}'`);
    const ctm = ctx.opset >= 16 ? attrString(ctx.node, 'coordinate_transformation_mode', 'half_pixel') : 'output_half_pixel';
    if (ctm !== 'half_pixel' && ctm !== 'output_half_pixel') throw unsupported(ctx, `coordinate_transformation_mode '${ctm}'`);
    const oh = attrInt(ctx.node, 'output_height', 1), ow = attrInt(ctx.node, 'output_width', 1);
    const ratio = attrInt(ctx.node, 'sampling_ratio', 0);
    const scale = attrFloat(ctx.node, 'spatial_scale', 1);
    const offset = ctm === 'half_pixel' ? 0.5 : 0;
    const out = alloc(x.type, R * C * oh * ow, ctx, false);
    for (let r = 0; r < R; r++) {
      const b = bi.data[r]!;
      if (!(b >= 0 && b < N)) throw badModel(ctx, `batch index ${b} is outside [0, ${N})`);
      const x1 = rois.data[r * 4]! * scale - offset, y1 = rois.data[r * 4 + 1]! * scale - offset;
      const x2 = rois.data[r * 4 + 2]! * scale - offset, y2 = rois.data[r * 4 + 3]! * scale - offset;
      let rw = x2 - x1, rh = y2 - y1;
      if (ctm === 'output_half_pixel') { rw = Math.max(rw, 1); rh = Math.max(rh, 1); }
      const bh = rh / oh, bw = rw / ow;
      const gh = ratio > 0 ? ratio : Math.ceil(rh / oh), gw = ratio > 0 ? ratio : Math.ceil(rw / ow);
      const cnt = Math.max(gh * gw, 1);
      // the bilinear taps of every sample of every bin, shared by all channels
      const taps: Array<{ p: number[]; w: number[] }[]> = [];
      for (let ph = 0; ph < oh; ph++) {
        for (let pw = 0; pw < ow; pw++) {
          const bin: { p: number[]; w: number[] }[] = [];
          for (let iy = 0; iy < gh; iy++) {
            const yy = y1 + ph * bh + ((iy + 0.5) * bh) / gh;
            for (let ix = 0; ix < gw; ix++) {
              const xx = x1 + pw * bw + ((ix + 0.5) * bw) / gw;
              if (yy < -1 || yy > H || xx < -1 || xx > W) { bin.push({ p: [0, 0, 0, 0], w: [0, 0, 0, 0] }); continue; }
              let y = Math.max(yy, 0), xv = Math.max(xx, 0);
              let yl = Math.floor(y), xl = Math.floor(xv), yh: number, xh: number;
              if (yl >= H - 1) { yl = yh = H - 1; y = yl; } else yh = yl + 1;
              if (xl >= W - 1) { xl = xh = W - 1; xv = xl; } else xh = xl + 1;
              const ly = y - yl, lx = xv - xl, hy = 1 - ly, hx = 1 - lx;
              bin.push({ p: [yl * W + xl, yl * W + xh, yh * W + xl, yh * W + xh], w: [hy * hx, hy * lx, ly * hx, ly * lx] });
            }
          }
          taps.push(bin);
        }
      }
      for (let c = 0; c < C; c++) {
        const base = (b * C + c) * H * W;
        taps.forEach((bin, k) => {
          let acc = mode === 'avg' ? 0 : -Infinity;
          for (const { p, w } of bin) {
            if (mode === 'avg') acc += w[0]! * x.data[base + p[0]!]! + w[1]! * x.data[base + p[1]!]! + w[2]! * x.data[base + p[2]!]! + w[3]! * x.data[base + p[3]!]!;
            else acc = Math.max(acc, w[0]! * x.data[base + p[0]!]!, w[1]! * x.data[base + p[1]!]!, w[2]! * x.data[base + p[2]!]!, w[3]! * x.data[base + p[3]!]!);
          }
          out[(r * C + c) * oh * ow + k] = mode === 'avg' ? acc / cnt : bin.length ? acc : 0;
        });
      }
    }
    return [{ type: x.type, dims: [R, C, oh, ow], data: out }];
  },
};

