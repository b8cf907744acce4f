// Run the Khronos glTF validator (npm package gltf-validator) on .glb files and print one JSON
// array holding each file's report. Usage: node gltf_validate.mjs FILE.glb...
// The package is found through GLOBEMILL_GLTF_VALIDATOR (its folder, e.g.
// .ci/node/node_modules/gltf-validator), else by ordinary module resolution.
import { readFileSync } from "node:fs";
import { basename } from "node:path";
import { createRequire } from "node:module";

const require = createRequire(import.meta.url);
const validator = require(process.env.GLOBEMILL_GLTF_VALIDATOR || "gltf-validator");

const reports = [];
for (const file of process.argv.slice(2)) {
  const bytes = new Uint8Array(readFileSync(file));
  // maxIssues 0: report every issue, not the first 100
  const report = await validator.validateBytes(bytes, { uri: basename(file), maxIssues: 0 });
  reports.push(report);
}
process.stdout.write(JSON.stringify(reports));
