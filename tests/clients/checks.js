// checks.js: what the node tests of the clients share (tests/clients/report, tests/clients/web): the
// PASS/FAIL list with its exit code, --name value arguments, and playwright-core from the folder where
// `npm ci` installed it (report.browser_setup).
'use strict';

const path = require('node:path');
const { createRequire } = require('node:module');

let passed = 0;
let failed = 0;

// Prints PASS or FAIL with the detail; returns ok.
function check(name, ok, detail = '') {
  if (ok) passed += 1;
  else failed += 1;
  console.log(`${ok ? 'PASS' : 'FAIL'}: ${name}${detail ? ` -- ${detail}` : ''}`);
  return ok;
}

// Prints "N passed, N failed" and sets the exit code: 0 only when something passed and nothing failed.
function finish() {
  console.log(`${passed} passed, ${failed} failed`);
  process.exitCode = failed === 0 && passed > 0 ? 0 : 1;
}

// "--key value" pairs into an object; every key of `required` must be there.
function parseArgs(argv, required) {
  const out = {};
  for (let i = 2; i < argv.length; i += 2) {
    if (!argv[i].startsWith('--') || i + 1 >= argv.length) throw new Error(`bad argument ${argv[i]}`);
    out[argv[i].slice(2)] = argv[i + 1];
  }
  for (const key of required) {
    if (!out[key]) throw new Error(`--${key} is required`);
  }
  return out;
}

// playwright-core's chromium launcher, from the folder holding its node_modules.
function playwrightChromium(modulesDir) {
  return createRequire(path.join(path.resolve(modulesDir), 'package.json'))('playwright-core').chromium;
}

module.exports = { check, finish, parseArgs, playwrightChromium };
