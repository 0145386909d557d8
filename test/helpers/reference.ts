/**
 * The open reference data the tests check against (NIST StRD Norris, the UCI gas-turbine data
 * set), kept in test/reference with their sources and licences (its README.md), so every clone
 * runs the checks; CANSIGHT_REFERENCE_DIR names another folder holding the same files.
 */
import { existsSync, readFileSync } from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';

const IN_REPOSITORY = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../reference');

/** The folder the reference files are read from. */
export function referenceDir(): string {
  return process.env.CANSIGHT_REFERENCE_DIR ? path.resolve(process.env.CANSIGHT_REFERENCE_DIR) : IN_REPOSITORY;
}

/** Text of one reference file; a missing file says where it was looked for and how to point elsewhere. */
export function referenceText(name: string): string {
  const file = path.join(referenceDir(), name);
  if (!existsSync(file)) {
    throw new Error(`Reference file ${name} not found at ${file}: it belongs in test/reference (see its README.md), or CANSIGHT_REFERENCE_DIR names the folder that holds it`);
  }
  return readFileSync(file, 'utf8');
}
