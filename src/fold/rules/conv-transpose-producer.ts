// Norm after a ConvTranspose (group >= 1): W is [Cin, Cout/group, k...] and output channel g*(Cout/group) + j
// takes W[i, j, ...] for input channel i of group g; W' scales those by s of that channel, b' = s*b + t.
import { layouts } from '../weights.js';
import { outputChannelScaling } from './output-channel-scaling.js';

export const convTransposeProducer = outputChannelScaling('conv-transpose-producer', 'ConvTranspose', (v, layer) => layouts.convTransposeOutput(v, layer.group));
