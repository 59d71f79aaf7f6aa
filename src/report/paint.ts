// Colour for text reports: ANSI SGR sequences (the terminal standard, ECMA-48), or nothing at all. Callers
// decide with useColour() from format.ts: only on a TTY and never when NO_COLOR is set.
import { PAINT_MARK } from './format.js';

export interface Paint {
  good: (s: string) => string;
  warn: (s: string) => string;
  bad: (s: string) => string;
  dim: (s: string) => string;
  bold: (s: string) => string;
}

const sgr = (code: string) => (s: string) => `${PAINT_MARK}[${code}m${s}${PAINT_MARK}[0m`;
const plain = (s: string) => s;

export function paint(colour: boolean): Paint {
  if (!colour) return { good: plain, warn: plain, bad: plain, dim: plain, bold: plain };
  return { good: sgr('32'), warn: sgr('33'), bad: sgr('31'), dim: sgr('2'), bold: sgr('1') };
}
