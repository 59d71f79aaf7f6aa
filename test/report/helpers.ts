// Outside checkers shared by the report and CLI tests: ajv (a general-purpose JSON Schema validator) with the
// shipped schema, and fast-xml-parser (a general XML parser) for JUnit output.
import { expect } from 'vitest';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { Ajv2020 } from 'ajv/dist/2020.js';
import { XMLParser, XMLValidator } from 'fast-xml-parser';
import { ROOT } from '../helpers/cli.js';

export function schemaValidator() {
  const schema = JSON.parse(readFileSync(join(ROOT, 'src/report/schema/pleat-report.schema.json'), 'utf8'));
  const ajv = new Ajv2020({ allErrors: true, strict: true, allowUnionTypes: true });
  return ajv.compile(schema);
}

export function parseJunit(xml: string) {
  expect(XMLValidator.validate(xml)).toBe(true);
  const p = new XMLParser({ ignoreAttributes: false, attributeNamePrefix: '@', isArray: (name) => ['testsuite', 'testcase'].includes(name) });
  return p.parse(xml);
}

