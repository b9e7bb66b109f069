/**
 * Registers test/native-ts-hooks.mjs, so that Node's own module loader runs
 * the TypeScript of src/ and test/ (vitest.config.ts passes this file to
 * every test process with --import; worker threads inherit it).
 */
import { register } from 'node:module';

register('./native-ts-hooks.mjs', import.meta.url);
