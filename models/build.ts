// Builds pleat's demo models: three small networks for a bakery packing line and its pumps, with invented
// seeded weights (not trained). Run as `npm run models`; it rewrites models/*.onnx in the repository.
//
// Determinism: the generator uses only integer hashing, +, *, / and sqrt (all exactly specified in IEEE 754
// and JavaScript), never Math.log/exp/cos, whose last bits may differ between engines. So the same script
// gives the same bytes on every machine, which the models test checks against the committed files.
import { mkdirSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { GraphBuilder, f, modelBytes, rng, type Dim } from './builder.js';

/** Approximately standard normal: the Irwin-Hall sum of 12 uniforms, minus 6 (arithmetic only). */
function gauss(r: () => number): number {
  let s = 0;
  for (let i = 0; i < 12; i++) s += r();
  return s - 6;
}

interface ConvOpts {
  stride?: number;
  pad?: number;
  group?: number;
  dilation?: number;
  bias?: boolean;
  /** Output channels whose filters are nearly zero (they feed the near-dead norm channels). */
  dead?: number[];
}

interface NormOpts { dead?: number[]; epsilon?: number }

/** A small network-building vocabulary over GraphBuilder, drawing every weight from one seeded stream. */
class Net {
  readonly g: GraphBuilder;
  private readonly r: () => number;
  constructor(name: string, seed: number) {
    this.g = new GraphBuilder(name);
    this.r = rng(seed);
  }

  /** He-like initialisation: normal with standard deviation sqrt(2 / fan_in). */
  private he(n: number, fanIn: number): Float32Array {
    const sd = Math.sqrt(2 / fanIn);
    const out = new Float32Array(n);
    for (let i = 0; i < n; i++) out[i] = gauss(this.r) * sd;
    return out;
  }

  private small(n: number, sd: number): Float32Array {
    const out = new Float32Array(n);
    for (let i = 0; i < n; i++) out[i] = gauss(this.r) * sd;
    return out;
  }

  private quiet(w: Float32Array, per: number, channels: number[] | undefined): void {
    for (const c of channels ?? []) for (let i = c * per; i < (c + 1) * per; i++) w[i] = w[i]! * 1e-3;
  }

  /** Conv over 1 or 2 spatial dims; weights [cout, cin/group, ...kernel]. */
  conv(name: string, x: string, cin: number, cout: number, kernel: number[], o: ConvOpts = {}): string {
    const group = o.group ?? 1, stride = o.stride ?? 1, pad = o.pad ?? 0, dil = o.dilation ?? 1;
    const k = kernel.reduce((a, b) => a * b, 1);
    const per = (cin / group) * k;
    const w = this.he(cout * per, per);
    this.quiet(w, per, o.dead);
    const inputs = [x, this.g.init(`${name}.weight`, [cout, cin / group, ...kernel], w)];
    if (o.bias) inputs.push(this.g.init(`${name}.bias`, [cout], this.small(cout, 0.05)));
    const attrs: Record<string, number | number[]> = {
      kernel_shape: kernel, strides: kernel.map(() => stride), pads: [...kernel, ...kernel].map(() => pad),
    };
    if (dil !== 1) attrs.dilations = kernel.map(() => dil);
    if (group !== 1) attrs.group = group;
    return this.g.node('Conv', inputs, attrs, { name, outputs: [`${name}.y`] });
  }

  /** ConvTranspose over 2 spatial dims; weights [cin, cout/group, kH, kW]. */
  deconv(name: string, x: string, cin: number, cout: number, k: number, o: ConvOpts = {}): string {
    const group = o.group ?? 1, stride = o.stride ?? 1, pad = o.pad ?? 0;
    const per = (cout / group) * k * k;
    // each output pixel sums about (cin/group) * (k/stride)^2 products
    const w = this.he(cin * per, (cin / group) * (k / stride) * (k / stride));
    if (o.dead) {
      // output channel c of group gi lives at column c - gi*cout/group of every input channel in that group
      const cg = cout / group;
      for (const c of o.dead) {
        const gi = Math.floor(c / cg), col = c - gi * cg;
        for (let i = gi * (cin / group); i < (gi + 1) * (cin / group); i++) {
          for (let j = 0; j < k * k; j++) { const at = (i * cg + col) * k * k + j; w[at] = w[at]! * 1e-3; }
        }
      }
    }
    const inputs = [x, this.g.init(`${name}.weight`, [cin, cout / group, k, k], w)];
    if (o.bias) inputs.push(this.g.init(`${name}.bias`, [cout], this.small(cout, 0.05)));
    const attrs: Record<string, number | number[]> = { kernel_shape: [k, k], strides: [stride, stride], pads: [pad, pad, pad, pad] };
    if (group !== 1) attrs.group = group;
    return this.g.node('ConvTranspose', inputs, attrs, { name, outputs: [`${name}.y`] });
  }

  /**
   * Inference-mode BatchNormalization with running statistics of the kind a trained network carries:
   * means away from 0, variances away from 1, scales near 1 with a little spread, and near-dead channels
   * (variance ~1e-6, tiny scale) where the filter barely responds.
   */
  bn(name: string, x: string, c: number, o: NormOpts = {}): string {
    const scale = new Float32Array(c), bias = new Float32Array(c), mean = new Float32Array(c), variance = new Float32Array(c);
    const dead = new Set(o.dead ?? []);
    for (let i = 0; i < c; i++) {
      if (dead.has(i)) {
        scale[i] = 2e-4 * (1 + this.r());
        bias[i] = 0.01 * gauss(this.r);
        mean[i] = 0.003 * gauss(this.r);
        variance[i] = 1e-6 * (0.5 + this.r());
      } else {
        scale[i] = 0.7 + 0.6 * this.r();
        bias[i] = 0.15 * gauss(this.r);
        mean[i] = 0.1 + 0.4 * gauss(this.r);
        const s = 0.3 + 1.4 * this.r();
        variance[i] = s * s;
      }
    }
    const inputs = [x,
      this.g.init(`${name}.scale`, [c], scale), this.g.init(`${name}.bias`, [c], bias),
      this.g.init(`${name}.mean`, [c], mean), this.g.init(`${name}.var`, [c], variance)];
    return this.g.node('BatchNormalization', inputs, { epsilon: f(o.epsilon ?? 1e-5) }, { name, outputs: [`${name}.y`] });
  }

  /** Gemm with weights [out, in] (transB=1), as dense layers are usually exported. */
  dense(name: string, x: string, nin: number, nout: number, outName?: string): string {
    const w = this.he(nout * nin, nin);
    const inputs = [x, this.g.init(`${name}.weight`, [nout, nin], w), this.g.init(`${name}.bias`, [nout], this.small(nout, 0.05))];
    return this.g.node('Gemm', inputs, { transB: 1 }, { name, outputs: [outName ?? `${name}.y`] });
  }

  op(opType: string, name: string, inputs: string[], attrs: Record<string, number | number[]> = {}, outName?: string): string {
    return this.g.node(opType, inputs, attrs, { name, outputs: [outName ?? `${name}.y`] });
  }
}

const COMMON = { opset: 17, irVersion: 8, producer: 'pleat-demo', producerVersion: '1' };
const NOT_TRAINED = 'Weights are invented seeded data, not trained: the model shows folding, not accuracy.';

/** Inspection camera on a bakery packing line: sorts trays into ok / underbaked / burnt / misplaced. */
function traySorter(): Uint8Array {
  const n = new Net('tray_sorter', 0x7a5e_0001);
  const batch: Dim = 'batch';
  n.g.input('image', [batch, 3, 64, 64]);

  // stem: 64x64 -> 32x32
  let x = n.conv('stem.conv', 'image', 3, 16, [3, 3], { stride: 2, pad: 1, dead: [5] });
  x = n.op('Relu', 'stem.relu', [n.bn('stem.bn', x, 16, { dead: [5] })]);

  // residual block 1 (identity skip)
  let y = n.conv('res1.conv_a', x, 16, 16, [3, 3], { pad: 1 });
  y = n.op('Relu', 'res1.relu_a', [n.bn('res1.bn_a', y, 16)]);
  y = n.bn('res1.bn_b', n.conv('res1.conv_b', y, 16, 16, [3, 3], { pad: 1 }), 16);
  x = n.op('Relu', 'res1.relu', [n.op('Add', 'res1.add', [y, x])]);

  // residual block 2 (stride 2, projected skip): 32x32 -> 16x16
  y = n.conv('res2.conv_a', x, 16, 32, [3, 3], { stride: 2, pad: 1 });
  y = n.op('Relu', 'res2.relu_a', [n.bn('res2.bn_a', y, 32)]);
  y = n.bn('res2.bn_b', n.conv('res2.conv_b', y, 32, 32, [3, 3], { pad: 1, dead: [11] }), 32, { dead: [11] });
  const skip = n.bn('res2.skip_bn', n.conv('res2.skip_conv', x, 16, 32, [1, 1], { stride: 2 }), 32);
  x = n.op('Relu', 'res2.relu', [n.op('Add', 'res2.add', [y, skip])]);

  // depthwise separable block 1: 16x16 -> 8x8
  y = n.conv('ds1.dw', x, 32, 32, [3, 3], { stride: 2, pad: 1, group: 32 });
  y = n.op('Relu', 'ds1.dw_relu', [n.bn('ds1.dw_bn', y, 32, { epsilon: 1e-3 })]);
  y = n.bn('ds1.pw_bn', n.conv('ds1.pw', y, 32, 48, [1, 1], { dead: [12, 30] }), 48, { dead: [12, 30] });
  x = n.op('Relu', 'ds1.relu', [y]);

  // depthwise separable block 2 (linear pointwise output)
  y = n.conv('ds2.dw', x, 48, 48, [3, 3], { pad: 1, group: 48 });
  y = n.op('Relu', 'ds2.dw_relu', [n.bn('ds2.dw_bn', y, 48, { epsilon: 1e-3 })]);
  x = n.bn('ds2.pw_bn', n.conv('ds2.pw', y, 48, 64, [1, 1]), 64);

  // feature tap: the conv output feeds the classifier through a norm AND the placement head directly, so
  // its norm cannot move into the conv (the placement head would change) nor into a later layer (Relu).
  const tap = n.conv('tap.conv', x, 64, 64, [1, 1], { bias: true });
  y = n.op('Relu', 'tap.relu', [n.bn('tap.bn', tap, 64)]);
  y = n.op('Flatten', 'head.flatten', [n.op('GlobalAveragePool', 'head.pool', [y])], { axis: 1 });
  n.dense('head.fc', y, 64, 4, 'class_logits');
  const p = n.op('Flatten', 'place.flatten', [n.op('GlobalAveragePool', 'place.pool', [tap])], { axis: 1 });
  n.dense('place.fc', p, 64, 2, 'tray_offset');

  n.g.output('class_logits', [batch, 4]);
  n.g.output('tray_offset', [batch, 2]);
  return modelBytes(n.g, {
    ...COMMON,
    docString: 'Tray sorter for a bakery packing line camera. Input image: RGB 64x64. Outputs class_logits ' +
      '(ok, underbaked, burnt, misplaced) and tray_offset (x, y placement offset). ' + NOT_TRAINED,
    metadata: [['classes', 'ok,underbaked,burnt,misplaced'], ['scenario', 'pleat demo']],
  });
}

/** Vibration monitor for pump bearings: two accelerometer axes, 256 samples -> healthy / outer-race / cavitation. */
function pumpVibration(): Uint8Array {
  const n = new Net('pump_vibration', 0x7a5e_0002);
  n.g.input('vibration', [1, 2, 256]);
  let x = n.conv('c1.conv', 'vibration', 2, 16, [7], { stride: 2, pad: 3 });
  x = n.op('Relu', 'c1.relu', [n.bn('c1.bn', x, 16)]);
  x = n.conv('c2.conv', x, 16, 32, [5], { stride: 2, pad: 2, dead: [7] });
  x = n.op('Relu', 'c2.relu', [n.bn('c2.bn', x, 32, { dead: [7] })]);
  x = n.conv('c3.conv', x, 32, 32, [3], { stride: 2, pad: 1, bias: true });
  x = n.op('Relu', 'c3.relu', [n.bn('c3.bn', x, 32, { epsilon: 1e-3 })]);
  x = n.conv('c4.conv', x, 32, 48, [3], { pad: 2, dilation: 2 });
  x = n.op('Relu', 'c4.relu', [n.bn('c4.bn', x, 48)]);
  x = n.op('Flatten', 'head.flatten', [n.op('GlobalAveragePool', 'head.pool', [x])], { axis: 1 });
  // dense head with the norm after the activation: it can only move forward into fc2
  x = n.op('Relu', 'fc1.relu', [n.dense('fc1', x, 48, 24)]);
  x = n.bn('fc1.bn', x, 24, { epsilon: 1e-3, dead: [17] });
  n.dense('fc2', x, 24, 3, 'fault_logits');
  n.g.output('fault_logits', [1, 3]);
  return modelBytes(n.g, {
    ...COMMON,
    docString: 'Pump bearing vibration monitor. Input vibration: 2 accelerometer axes x 256 samples. Output ' +
      'fault_logits (healthy, outer-race fault, cavitation). ' + NOT_TRAINED,
    metadata: [['classes', 'healthy,outer-race-fault,cavitation'], ['scenario', 'pleat demo']],
  });
}

/** Tray-edge segmenter: per-pixel probability that a pixel lies on a tray's edge. */
function trayEdge(): Uint8Array {
  const n = new Net('tray_edge', 0x7a5e_0003);
  n.g.input('image', [1, 3, 64, 64]);
  // encoder: 64 -> 32 -> 16
  const e1 = n.op('Relu', 'enc1.relu', [n.bn('enc1.bn', n.conv('enc1.conv', 'image', 3, 16, [3, 3], { stride: 2, pad: 1 }), 16)]);
  const e2 = n.op('Relu', 'enc2.relu', [n.bn('enc2.bn', n.conv('enc2.conv', e1, 16, 32, [3, 3], { stride: 2, pad: 1 }), 32)]);
  // decoder: 16 -> 32 (with a skip from enc1) -> 64
  let d = n.deconv('dec1.up', e2, 32, 16, 4, { stride: 2, pad: 1, dead: [3] });
  d = n.op('Relu', 'dec1.relu', [n.bn('dec1.bn', d, 16, { dead: [3] })]);
  d = n.op('Add', 'dec1.skip', [d, e1]);
  d = n.deconv('dec2.up', d, 16, 8, 2, { stride: 2, group: 2, bias: true });
  d = n.op('Relu', 'dec2.relu', [n.bn('dec2.bn', d, 8)]);
  const logit = n.conv('head.conv', d, 8, 1, [1, 1], { bias: true });
  n.op('Sigmoid', 'head.sigmoid', [logit], {}, 'edge_mask');
  n.g.output('edge_mask', [1, 1, 64, 64]);
  return modelBytes(n.g, {
    ...COMMON,
    docString: 'Tray-edge segmenter. Input image: RGB 64x64. Output edge_mask: per-pixel edge probability. ' + NOT_TRAINED,
    metadata: [['scenario', 'pleat demo']],
  });
}

/** Every demo model by file name, freshly built. */
export function buildDemoModels(): Array<[string, Uint8Array]> {
  return [
    ['tray-sorter.onnx', traySorter()],
    ['pump-vibration.onnx', pumpVibration()],
    ['tray-edge.onnx', trayEdge()],
  ];
}

function writeAtomic(path: string, bytes: Uint8Array): void {
  const tmp = join(dirname(path), `.${process.pid}.${Date.now()}.tmp`);
  try {
    writeFileSync(tmp, bytes);
    renameSync(tmp, path);
  } finally {
    rmSync(tmp, { force: true });
  }
}

function main(): void {
  // dist/models/build.js -> <repo>/models
  const dir = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', 'models');
  mkdirSync(dir, { recursive: true });
  let total = 0;
  for (const [name, bytes] of buildDemoModels()) {
    writeAtomic(join(dir, name), bytes);
    total += bytes.byteLength;
    console.log(`${name.padEnd(22)} ${String(bytes.byteLength).padStart(8)} bytes`);
  }
  console.log(`${'together'.padEnd(22)} ${String(total).padStart(8)} bytes, written to ${dir}`);
}

if (process.argv[1] && import.meta.url === pathToFileURL(resolve(process.argv[1])).href) main();
