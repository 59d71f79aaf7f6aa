// STFT (ONNX operator docs, STFT-17): frames of frame_length samples, frame_step apart, each multiplied by the
// window (when given) and transformed with the DFT. signal [batch, length, 1|2] -> output [batch, frames, bins,
// 2], frames = floor((length - frame_length) / frame_step) + 1, bins = floor(frame_length / 2) + 1 when onesided
// (the default), else frame_length. frame_length defaults to the window's length.
import { attrInt } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, need } from './common.js';
import { checkSteps } from '../limits.js';
import { dftLine, twiddles } from './dft.js';

function scalar(v: Value, what: string, ctx: KernelContext): number {
  if (v.data.length !== 1) throw badModel(ctx, `${what} must be a scalar`);
  return Math.trunc(v.data[0]!);
}

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const x = need(inputs, 0, ctx), stepIn = need(inputs, 1, ctx), window = inputs[2], lengthIn = inputs[3];
  if (x.dims.length !== 3 || (x.dims[2] !== 1 && x.dims[2] !== 2)) throw badModel(ctx, `signal has dims [${x.dims.join(',')}]; expected [batch, length, 1 or 2]`);
  const [batch, sigLen, c] = x.dims as [number, number, number];
  const step = scalar(stepIn, 'frame_step', ctx);
  if (step < 1) throw badModel(ctx, `frame_step ${step} is not positive`);
  if (window && window.dims.length !== 1) throw badModel(ctx, `window has rank ${window.dims.length}; it must be 1-D`);
  const frameLen = lengthIn ? scalar(lengthIn, 'frame_length', ctx) : window ? window.dims[0]! : undefined;
  if (frameLen === undefined) throw badModel(ctx, 'neither window nor frame_length is given');
  if (window && window.dims[0] !== frameLen) throw badModel(ctx, `window length ${window.dims[0]} differs from frame_length ${frameLen}`);
  if (frameLen < 1 || frameLen > sigLen) throw badModel(ctx, `frame_length ${frameLen} is outside [1, ${sigLen}]`);
  const onesided = attrInt(ctx.node, 'onesided', 1) !== 0;
  const frames = Math.floor((sigLen - frameLen) / step) + 1;
  const bins = onesided ? Math.floor(frameLen / 2) + 1 : frameLen;
  checkSteps(ctx, batch * frames * bins * frameLen, 'the STFT');
  const y = alloc(x.type, batch * frames * bins * 2, ctx);
  const tw = twiddles(frameLen);
  const re = new Float64Array(frameLen), im = new Float64Array(frameLen);
  const oRe = new Float64Array(bins), oIm = new Float64Array(bins);
  for (let b = 0; b < batch; b++) {
    for (let f = 0; f < frames; f++) {
      for (let j = 0; j < frameLen; j++) {
        const at = (b * sigLen + f * step + j) * c;
        const w = window ? window.data[j]! : 1;
        re[j] = x.data[at]! * w;
        im[j] = c === 2 ? x.data[at + 1]! * w : 0;
      }
      dftLine(re, im, frameLen, frameLen, bins, false, tw, oRe, oIm);
      for (let k = 0; k < bins; k++) {
        const at = ((b * frames + f) * bins + k) * 2;
        y[at] = oRe[k]!;
        y[at + 1] = oIm[k]!;
      }
    }
  }
  return [{ type: x.type, dims: [batch, frames, bins, 2], data: y }];
}

export const STFT: Kernel = { op: 'STFT', domain: '', sinceVersion: 17, run };
