/**
 * The config reference, generated from the schemas themselves (their one-line docs and
 * defaults), so docs/runner.md cannot drift from the code: `tilewise config --fields` prints it
 * and a test compares it with the docs.
 */
import { z } from 'zod';
import { envKind, envKinds } from '@tilewise/envs';
import { SECTIONS } from './config';

interface JsonSchema {
  type?: string | string[];
  description?: string;
  properties?: Record<string, JsonSchema>;
  anyOf?: JsonSchema[];
  oneOf?: JsonSchema[];
  items?: JsonSchema;
  enum?: unknown[];
  const?: unknown;
}

function typeName(s: JsonSchema): string {
  if (s.const !== undefined) return JSON.stringify(s.const);
  if (s.enum) return s.enum.map((v) => JSON.stringify(v)).join(' or ');
  const alts = s.anyOf ?? s.oneOf;
  if (alts && alts.every((a) => a.properties)) return `one of ${alts.length} mappings`;
  if (alts) return alts.map(typeName).join(' or ');
  if (s.type === 'array') return `list of ${s.items ? typeName(s.items) : 'values'}`;
  if (s.type === 'object') return s.properties ? 'mapping' : 'mapping of values';
  return Array.isArray(s.type) ? s.type.join(' or ') : (s.type ?? 'value');
}

/** Rows [path, type, doc] for every field of `schema` under `root`, nested mappings expanded. */
export function fieldRows(schema: z.ZodType, root: string): string[][] {
  const rows: string[][] = [];
  const walk = (s: JsonSchema, path: string, doc: string | undefined): void => {
    const alts = s.anyOf ?? s.oneOf;
    const obj = s.properties ? s : alts?.find((a) => a.properties && !(a.anyOf ?? a.oneOf));
    if (obj?.properties && !(alts && alts.filter((a) => a.properties).length > 1)) {
      if (doc && path !== root) rows.push([path, 'mapping', doc]);
      for (const [k, v] of Object.entries(obj.properties)) walk(v, `${path}.${k}`, v.description);
      return;
    }
    rows.push([path, typeName(s), doc ?? '']);
  };
  walk(z.toJSONSchema(schema, { io: 'input', unrepresentable: 'any' }) as JsonSchema, root, undefined);
  return rows;
}

/** A Markdown table cell: pipes escaped. */
const cell = (s: string): string => s.replaceAll('|', '\\|');

/** One section's reference as a Markdown table under a heading. */
export function sectionReference(title: string, schema: z.ZodType, root: string): string {
  const rows = fieldRows(schema, root);
  const lines = ['| field | type | meaning (default) |', '|---|---|---|', ...rows.map((r) => `| \`${r[0]}\` | ${cell(r[1]!)} | ${cell(r[2]!)} |`)];
  return `### ${title}\n\n${lines.join('\n')}`;
}

/** The whole reference as Markdown: one table per section (env: one per registered surrogate). */
export function fieldReference(): string {
  const parts: string[] = [];
  for (const k of envKinds()) parts.push(sectionReference(`env (kind: ${k})`, envKind(k).schema, 'env'));
  for (const [name, schema] of Object.entries(SECTIONS)) parts.push(sectionReference(name, schema as z.ZodType, name));
  return parts.join('\n\n');
}
