// Byte sources live in src/io (memory, file, HTTP together); this path stays for parts/join.ts until issue 11's branch is merged.
export type { ByteSource } from '../io/source.js';
