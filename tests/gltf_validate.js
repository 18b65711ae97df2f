// Validate glTF / GLB files with the Khronos glTF validator (npm package
// gltf-validator).  Usage: node tests/gltf_validate.js FILE [FILE...]
// Prints one JSON object per file: {file, errors, warnings, infos, hints, messages}.
"use strict";
const fs = require("fs");
const path = require("path");
const validator = require("gltf-validator");

async function check(file) {
  const data = new Uint8Array(fs.readFileSync(file));
  const report = await validator.validateBytes(data, {
    uri: path.basename(file),
    maxIssues: 50,
    externalResourceFunction: (uri) => Promise.reject(new Error("external resources are not allowed: " + uri)),
  });
  const issues = report.issues;
  return {
    file,
    errors: issues.numErrors,
    warnings: issues.numWarnings,
    infos: issues.numInfos,
    hints: issues.numHints,
    messages: issues.messages.map((m) => `${m.severity} ${m.code} ${m.pointer || ""}: ${m.message}`),
  };
}

(async () => {
  let bad = 0;
  for (const f of process.argv.slice(2)) {
    const r = await check(f);
    if (r.errors) bad++;
    console.log(JSON.stringify(r));
  }
  process.exit(bad ? 1 : 0);
})().catch((e) => { console.error(String(e)); process.exit(3); });
