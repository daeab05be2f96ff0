// How the built server is started, in one place for the demo, the benchmarks and the soak; the
// `start` script in package.json says the same (tests/unit/server-start.test.ts keeps them equal).
// A larger young generation: ingest makes many short-lived objects per reading, and with V8's
// default semi-space they were collected so often that garbage collection took about a sixth of
// the server's time; 32 MB cut server CPU per reading by about 15 % in bench:ingest
// (docs/benchmarks.md, "Ingest").
export const SERVER_NODE_ARGS = ['--max-semi-space-size=32']
export const SERVER_ENTRY = '.output/server/index.mjs'
