// NonMaxSuppression (opsets 10, 11): per batch and class, boxes whose score exceeds score_threshold (when
// given) are taken in descending score order (equal scores: lower box index first) and kept unless their
// intersection over union with a box already kept exceeds iou_threshold (default 0), up to
// max_output_boxes_per_class (default 0: none). Boxes are [y1, x1, y2, x2] with either diagonal
// (center_point_box=0, the default) or [x_center, y_center, width, height] (1). Output: int64 rows
// [batch, class, box] in order of selection, batch-major then class.
import { DataType, attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need } from './common.js';

export const NonMaxSuppression: Kernel = {
  op: 'NonMaxSuppression', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const boxes = need(inputs, 0, ctx), scores = need(inputs, 1, ctx);
    const maxOut = inputs[2]?.data.length ? inputs[2].data[0]! : 0;
    const iouTh = inputs[3]?.data.length ? inputs[3].data[0]! : 0;
    const scoreTh = inputs[4]?.data.length ? inputs[4].data[0]! : undefined;
    const center = attrInt(ctx.node, 'center_point_box', 0) !== 0;
    if (boxes.dims.length !== 3 || boxes.dims[2] !== 4 || scores.dims.length !== 3 || scores.dims[0] !== boxes.dims[0] || scores.dims[2] !== boxes.dims[1]) {
      throw badModel(ctx, `boxes [${boxes.dims}] and scores [${scores.dims}] do not match`);
    }
    const [B, K] = boxes.dims as [number, number];
    const classes = scores.dims[1]!;
    // corners as [ymin, xmin, ymax, xmax]
    const corner = (b: number, i: number): [number, number, number, number] => {
      const o = (b * K + i) * 4, d = boxes.data;
      if (center) {
        const xc = d[o]!, yc = d[o + 1]!, w = d[o + 2]!, h = d[o + 3]!;
        return [yc - h / 2, xc - w / 2, yc + h / 2, xc + w / 2];
      }
      return [Math.min(d[o]!, d[o + 2]!), Math.min(d[o + 1]!, d[o + 3]!), Math.max(d[o]!, d[o + 2]!), Math.max(d[o + 1]!, d[o + 3]!)];
    };
    const iou = (a: number[], b: number[]): number => {
      const areaA = (a[2]! - a[0]!) * (a[3]! - a[1]!), areaB = (b[2]! - b[0]!) * (b[3]! - b[1]!);
      if (areaA <= 0 || areaB <= 0) return 0;
      const ih = Math.min(a[2]!, b[2]!) - Math.max(a[0]!, b[0]!), iw = Math.min(a[3]!, b[3]!) - Math.max(a[1]!, b[1]!);
      if (ih <= 0 || iw <= 0) return 0;
      const inter = ih * iw;
      return inter / (areaA + areaB - inter);
    };
    const rows: number[] = [];
    for (let b = 0; b < B; b++) {
      const cs = Array.from({ length: K }, (_, i) => corner(b, i));
      for (let c = 0; c < classes; c++) {
        const s = (i: number) => scores.data[(b * classes + c) * K + i]!;
        const cand = Array.from({ length: K }, (_, i) => i).filter((i) => scoreTh === undefined || s(i) > scoreTh);
        cand.sort((i, j) => s(j) - s(i) || i - j);
        const kept: number[] = [];
        for (const i of cand) {
          if (kept.length >= maxOut) break;
          if (kept.every((k) => iou(cs[k]!, cs[i]!) <= iouTh)) kept.push(i);
        }
        for (const i of kept) rows.push(b, c, i);
      }
    }
    const out = alloc(DataType.INT64, rows.length, ctx, false);
    out.set(rows);
    return [{ type: DataType.INT64, dims: [rows.length / 3, 3], data: out }];
  },
};
