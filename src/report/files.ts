// --report FILE: which format each report file gets. Writing happens in the output transaction
// (src/jobs/outputs.ts), with the model and its side file, so a report always belongs to the files beside it.
import { extname } from 'node:path';
import { PleatError } from '../errors.js';
import { FORMATS, type Format } from './format.js';

export interface ReportSpec { format: Format; file: string }

const BY_EXTENSION: Record<string, Format> = {
  '.json': 'json', '.xml': 'junit', '.md': 'markdown', '.markdown': 'markdown', '.txt': 'text', '.log': 'text', '.html': 'html', '.htm': 'html',
};

/** Parse `--report FILE` (format from the extension) or `--report FORMAT:FILE`; one file per format. */
export function parseReportSpecs(list: readonly string[]): ReportSpec[] {
  const out: ReportSpec[] = [];
  for (const text of list) {
    const colon = text.indexOf(':');
    // (any case: JSON:r.json is json, not a folder named 'JSON:r')
    const prefix = colon > 0 ? text.slice(0, colon).toLowerCase() : '';
    let spec: ReportSpec;
    if ((FORMATS as readonly string[]).includes(prefix)) {
      spec = { format: prefix as Format, file: text.slice(colon + 1) };
    } else {
      const format = BY_EXTENSION[extname(text).toLowerCase()];
      if (!format) {
        throw new PleatError('usage', `--report '${text}': cannot tell the format from the extension; use .json, .xml (junit), .md, .txt or .html, or write FORMAT:FILE (formats: ${FORMATS.join(', ')})`);
      }
      spec = { format, file: text };
    }
    if (spec.file === '') throw new PleatError('usage', `--report '${text}' names no file`);
    const twin = out.find((s) => s.format === spec.format);
    if (twin) throw new PleatError('usage', `--report: two files for the ${spec.format} format ('${twin.file}' and '${spec.file}'); give one file per format`);
    out.push(spec);
  }
  return out;
}
