// Norm after a Conv (1-D/2-D/3-D, grouped, depthwise): W' = s ⊙ W along output channels (W is
// [Cout, Cin/group, k...]), b' = s*b + t.
import { layouts } from '../weights.js';
import { outputChannelScaling } from './output-channel-scaling.js';

export const convProducer = outputChannelScaling('conv-producer', 'Conv', (v) => layouts.convOutput(v));
