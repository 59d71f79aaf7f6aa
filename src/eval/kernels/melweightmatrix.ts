// MelWeightMatrix (opset 17): triangular mel filters over the onesided DFT bins, following the computation in the
// ONNX operator docs' reference (the backend test case melweightmatrix.py, onnx 1.12.0): num_mel_bins + 2 points
// equally spaced on the mel scale (mel = 2595 log10(1 + hz / 700)) between lower and upper edge, mapped to bin
// indices floor((dft_length + 1) * hz / sample_rate); filter i rises from point i to point i+1 and falls to
// point i+2. Output [floor(dft_length / 2) + 1, num_mel_bins] in output_datatype (default FLOAT).
import { attrInt } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { DataType, need } from './common.js';
import { castValue } from './cast.js';
import { checkMade } from '../limits.js';

function scalar(inputs: Array<Value | undefined>, i: number, what: string, ctx: KernelContext): number {
  const v = need(inputs, i, ctx);
  if (v.data.length !== 1) throw badModel(ctx, `${what} must be a scalar`);
  return v.data[0]!;
}

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const mels = Math.trunc(scalar(inputs, 0, 'num_mel_bins', ctx));
  const dftLength = Math.trunc(scalar(inputs, 1, 'dft_length', ctx));
  const rate = Math.trunc(scalar(inputs, 2, 'sample_rate', ctx));
  const lower = scalar(inputs, 3, 'lower_edge_hertz', ctx), upper = scalar(inputs, 4, 'upper_edge_hertz', ctx);
  if (mels < 1 || dftLength < 1 || rate < 1) throw badModel(ctx, 'num_mel_bins, dft_length and sample_rate must be positive');
  if (!(lower >= 0 && lower <= upper)) throw badModel(ctx, `edges ${lower} and ${upper} Hz are not 0 <= lower <= upper`);
  const specBins = Math.floor(dftLength / 2) + 1;
  checkMade(ctx, specBins * mels, 'the mel weight matrix');
  const toMel = (hz: number) => 2595 * Math.log10(1 + hz / 700);
  const lowMel = toMel(lower), highMel = toMel(upper);
  const step = (highMel - lowMel) / (mels + 2);
  const points = Array.from({ length: mels + 2 }, (_, i) => {
    const hz = 700 * (10 ** ((i * step + lowMel) / 2595) - 1);
    return Math.floor(((dftLength + 1) * hz) / rate);
  });
  const w = new Float64Array(specBins * mels);
  const set = (j: number, i: number, v: number) => {
    if (j < 0 || j >= specBins) throw badModel(ctx, `a mel filter reaches bin ${j}, past the ${specBins} spectrogram bins (upper edge above the Nyquist frequency)`);
    w[j * mels + i] = v;
  };
  for (let i = 0; i < mels; i++) {
    const lo = points[i]!, mid = points[i + 1]!, hi = points[i + 2]!;
    if (mid === lo) set(mid, i, 1);
    else for (let j = lo; j <= mid; j++) set(j, i, (j - lo) / (mid - lo));
    if (hi > mid) for (let j = mid; j < hi; j++) set(j, i, (hi - j) / (hi - mid));
  }
  const v: Value = { type: DataType.DOUBLE, dims: [specBins, mels], data: w };
  return [castValue(v, attrInt(ctx.node, 'output_datatype', DataType.FLOAT), ctx)];
}

export const MelWeightMatrix: Kernel = { op: 'MelWeightMatrix', domain: '', sinceVersion: 17, run };
