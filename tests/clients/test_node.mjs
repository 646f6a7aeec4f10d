// groupfit from Node.js through better-sqlite3, on the demo data.
//
//   node tests/clients/test_node.mjs <path of groupfit.so> <source dir>
//
// better-sqlite3 comes from tests/clients/node_modules, installed from the
// committed lock file by `npm ci --prefix tests/clients`; without it this test
// fails (it is never skipped).
//
// Reads datasets/deliveries.csv and datasets/depots.csv with a CSV parser of
// its own (an empty field is NULL, numbers parsed by JavaScript), loads the
// module into an in-memory database with db.loadExtension(), and runs the
// README's demo analysis: groupfit(minutes, carrier, distance_km, weight_kg),
// groupfit_coef with coding=effect, groupfit_levels, groupfit_deviations,
// groupfit_tests, groupfit_summary and groupfit_pairs (Tukey, and Dunnett
// against amberpost). The sqlite3 command-line shell runs the same analysis
// on the database that datasets/build_demo.sql builds from the same CSVs
// and stores its results in that database file; this script then requires
// the model BLOBs to be byte-identical and every report row to be identical
// (same columns, same types, integers equal, reals bit for bit, texts equal).
// Exits 1 on any difference, printing each one.
import { execFileSync, spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readFileSync, rmSync } from "node:fs";
import { createRequire } from "node:module";
import { tmpdir } from "node:os";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";

const here = dirname(fileURLToPath(import.meta.url));
let failures = 0;
let checks = 0;
function check(ok, what) {
  checks += 1;
  if (!ok) {
    failures += 1;
    console.log(`FAIL: ${what}`);
  }
  return ok;
}
function fatal(what) {
  console.log(`FAIL: ${what}`);
  process.exit(1);
}

if (process.argv.length !== 4) {
  console.log("usage: node test_node.mjs <groupfit module> <source dir>");
  process.exit(2);
}
const [modulePath, sourceDir] = process.argv.slice(2);
if (!existsSync(modulePath)) fatal(`the module ${modulePath} does not exist`);

// ------------------------------------------------------------- better-sqlite3
let Database;
try {
  Database = createRequire(join(here, "package.json"))("better-sqlite3");
} catch (e) {
  fatal(
    `better-sqlite3 cannot be loaded from ${join(here, "node_modules")} (${e.code || e.message}).\n` +
      "      Install the Node client's dependencies from the lock file first:\n" +
      "        npm ci --prefix tests/clients",
  );
}

// -------------------------------------------------------------------- the data
// RFC 4180 records: fields separated by commas, optionally in double quotes
// ("" inside quotes is one quote); records end with \n or \r\n.
function parseCsv(text) {
  const records = [];
  let record = [];
  let field = "";
  let quoted = false;
  for (let i = 0; i < text.length; i++) {
    const c = text[i];
    if (quoted) {
      if (c === '"' && text[i + 1] === '"') {
        field += '"';
        i++;
      } else if (c === '"') quoted = false;
      else field += c;
    } else if (c === '"') quoted = true;
    else if (c === ",") {
      record.push(field);
      field = "";
    } else if (c === "\n" || c === "\r") {
      if (c === "\r" && text[i + 1] === "\n") i++;
      record.push(field);
      records.push(record);
      record = [];
      field = "";
    } else field += c;
  }
  if (field !== "" || record.length) {
    record.push(field);
    records.push(record);
  }
  return records;
}

function readTable(file, columns) {
  const [header, ...rows] = parseCsv(readFileSync(join(sourceDir, "datasets", file), "utf8"));
  if (!check(JSON.stringify(header) === JSON.stringify(columns), `${file} header ${JSON.stringify(header)}`))
    process.exit(1);
  for (const r of rows) check(r.length === columns.length, `${file}: a row has ${r.length} fields`);
  return rows;
}

const text = (s) => (s === "" ? null : s);
const real = (s) => {
  if (s === "") return null;
  const x = Number(s);
  check(Number.isFinite(x) && s.trim() === s, `not a number: '${s}'`);
  return x;
};
const integer = (s) => {
  const x = real(s);
  check(x === null || Number.isInteger(x), `not an integer: '${s}'`);
  return x === null ? null : BigInt(x);
};

const deliveries = readTable("deliveries.csv", [
  "delivery_id", "depot_id", "carrier", "shift", "distance_km", "weight_kg", "minutes",
]).map((r) => [integer(r[0]), integer(r[1]), text(r[2]), text(r[3]), real(r[4]), real(r[5]), real(r[6])]);
const depots = readTable("depots.csv", ["depot_id", "depot_name", "region"]).map((r) => [
  integer(r[0]), r[1], r[2],
]);
check(deliveries.length === 2400, `deliveries.csv has 2400 rows (${deliveries.length})`);
check(depots.length === 8, `depots.csv has 8 rows (${depots.length})`);

// Integers come back as BigInt and reals as numbers, so that 2 and 2.0 differ.
const db = new Database(":memory:");
db.defaultSafeIntegers(true);
try {
  db.loadExtension(modulePath);
} catch (e) {
  fatal(`db.loadExtension(${modulePath}): ${e.message}`);
}
// The schema of datasets/build_demo.sql.
db.exec(`CREATE TABLE depots (depot_id INTEGER PRIMARY KEY, depot_name TEXT NOT NULL, region TEXT NOT NULL);
         CREATE TABLE deliveries (delivery_id INTEGER PRIMARY KEY, depot_id INTEGER REFERENCES depots(depot_id),
                                  carrier TEXT, shift TEXT, distance_km REAL, weight_kg REAL, minutes REAL);`);
const insertDepot = db.prepare("INSERT INTO depots VALUES (?, ?, ?)");
const insertDelivery = db.prepare("INSERT INTO deliveries VALUES (?, ?, ?, ?, ?, ?, ?)");
db.transaction(() => {
  for (const r of depots) insertDepot.run(r);
  for (const r of deliveries) insertDelivery.run(r);
})();
check(
  db.prepare("SELECT count(*) FROM deliveries WHERE weight_kg IS NULL").pluck().get() === 24n,
  "24 empty weights are NULL",
);
check(
  db.prepare("SELECT count(*) FROM deliveries WHERE typeof(minutes) = 'real'").pluck().get() === 2388n,
  "2388 minutes are reals",
);

// ---------------------------------------------------------- the demo analysis
const NAMES = "names=carrier, distance_km, weight_kg";
const reports = [
  ["coef", "groupfit_coef", `coding=effect; ${NAMES}`],
  ["levels", "groupfit_levels", NAMES],
  ["deviations", "groupfit_deviations", NAMES],
  ["tests", "groupfit_tests", NAMES],
  ["summary", "groupfit_summary", NAMES],
  ["pairs", "groupfit_pairs", NAMES],
  ["pairs_vs", "groupfit_pairs", `vs=amberpost; ${NAMES}`],
];
const MODEL_SQL = "SELECT groupfit(minutes, carrier, distance_km, weight_kg) FROM deliveries";
const ONEWAY_SQL = "SELECT groupfit(minutes, carrier) FROM deliveries";

const model = db.prepare(MODEL_SQL).pluck().get();
const oneway = db.prepare(ONEWAY_SQL).pluck().get();
check(Buffer.isBuffer(model) && model.subarray(0, 4).equals(Buffer.from("GFm\x01", "latin1")), "model header");
const mine = {};
for (const [key, fn, options] of reports) {
  const st = db.prepare(`SELECT * FROM ${fn}(?, ?)`);
  mine[key] = { columns: st.columns().map((c) => c.name), rows: st.raw(true).all(model, options) };
  check(mine[key].rows.length > 0, `${fn} '${options}' returned rows`);
}

// Facts of the demo data (datasets/README.md), so that two clients agreeing on
// something wrong is not enough.
const summary = Object.fromEntries(mine.summary.columns.map((c, i) => [c, mine.summary.rows[0][i]]));
check(summary.rows_used === 2357n && summary.rows_dropped === 43n, `rows used/dropped ${summary.rows_used}/${summary.rows_dropped}`);
check(
  summary.dropped_null_response === 12n && summary.dropped_null_group === 7n && summary.dropped_null_covariate === 24n,
  "rows dropped per reason 12, 7, 24",
);
check(summary.levels === 5n && summary.rank === 7n, `levels ${summary.levels}, rank ${summary.rank}`);
const coef = mine.coef.rows.map((r) => Object.fromEntries(mine.coef.columns.map((c, i) => [c, r[i]])));
check(
  JSON.stringify(coef.map((r) => r.label)) ===
    JSON.stringify(["intercept", "amberpost", "brightcart", "copperfox", "driftwing", "slope", "slope"]),
  `coefficient labels ${coef.map((r) => r.label)}`,
);
const slope = coef.find((r) => r.term === "distance_km");
check(slope && Math.abs(slope.estimate - 1.6) < 0.1, `distance slope near 1.6 (${slope && slope.estimate})`);
check(mine.pairs.rows.length === 10 && mine.pairs_vs.rows.length === 4, "10 pairs, 4 vs amberpost");

// ------------------------------------- the same analysis in the sqlite3 shell
const shell = spawnSync("sh", ["-c", "command -v sqlite3"], { encoding: "utf8" }).stdout.trim();
if (!shell) fatal("the sqlite3 shell is not on PATH");
const tmp = mkdtempSync(join(tmpdir(), "groupfit-node-"));
try {
  const demo = join(tmp, "demo.db");
  const build = spawnSync(shell, [demo], {
    cwd: sourceDir,
    input: readFileSync(join(sourceDir, "datasets", "build_demo.sql")),
    encoding: "utf8",
  });
  if (build.status !== 0) fatal(`build_demo.sql: ${build.stderr}`);
  const sqlText = (s) => `'${s.replaceAll("'", "''")}'`;
  let script = `.bail on\n.load ${modulePath}\n`;
  script += `CREATE TABLE shell_models AS SELECT (${MODEL_SQL}) AS m, (${ONEWAY_SQL}) AS m1;\n`;
  for (const [key, fn, options] of reports)
    script += `CREATE TABLE shell_${key} AS SELECT * FROM ${fn}((SELECT m FROM shell_models), ${sqlText(options)});\n`;
  script += "SELECT 'done';\n";
  let out;
  try {
    out = execFileSync(shell, [demo], { input: script, encoding: "utf8", stdio: ["pipe", "pipe", "pipe"] });
  } catch (e) {
    fatal(`the shell's analysis failed: ${e.stderr || e.message}`);
  }
  check(out.trim() === "done", `shell output ${JSON.stringify(out)}`);

  const theirs = new Database(demo, { readonly: true });
  theirs.defaultSafeIntegers(true);
  const [shellModel, shellOneway] = theirs.prepare("SELECT m, m1 FROM shell_models").raw(true).get();
  // The same rows in the same order give byte-identical models.
  check(Buffer.isBuffer(shellModel) && shellModel.equals(model), "the model BLOB equals the shell's, byte for byte");
  check(Buffer.isBuffer(shellOneway) && shellOneway.equals(oneway), "the one-way model BLOB equals the shell's");

  const same = (a, b) =>
    typeof a === typeof b &&
    (a === null ? b === null
      : typeof a === "number" ? Object.is(a, b)
      : Buffer.isBuffer(a) ? Buffer.isBuffer(b) && a.equals(b)
      : a === b);
  const show = (v) => (typeof v === "bigint" ? `${v}n` : Buffer.isBuffer(v) ? `blob(${v.length})` : JSON.stringify(v));
  for (const [key, fn] of reports) {
    const st = theirs.prepare(`SELECT * FROM shell_${key}`);
    const columns = st.columns().map((c) => c.name);
    const rows = st.raw(true).all();
    const a = mine[key];
    if (!check(JSON.stringify(columns) === JSON.stringify(a.columns), `${fn} (${key}) columns ${columns} vs ${a.columns}`))
      continue;
    if (!check(rows.length === a.rows.length, `${fn} (${key}): ${a.rows.length} rows, the shell's ${rows.length}`))
      continue;
    for (let r = 0; r < rows.length; r++)
      for (let c = 0; c < columns.length; c++)
        check(
          same(a.rows[r][c], rows[r][c]),
          `${fn} (${key}) row ${r + 1} ${columns[c]}: ${show(a.rows[r][c])} from Node, ${show(rows[r][c])} from the shell`,
        );
  }
  theirs.close();
} finally {
  rmSync(tmp, { recursive: true, force: true });
}

// An error reaches JavaScript as an exception with the module's exact text.
let message = "<no error>";
try {
  db.prepare("SELECT * FROM groupfit_coef(?, 'coding=foo')").all(model);
} catch (e) {
  message = e.message;
}
check(
  message ===
    "groupfit_coef: options: coding must be one of dummy, effect, weighted_effect, helmert, reverse_helmert, " +
      "successive, polynomial, custom (not 'foo')",
  `error text: ${message}`,
);
db.close();

if (failures) {
  console.log(`test_node: ${failures} of ${checks} checks failed`);
  process.exit(1);
}
console.log(`test_node: all ${checks} checks passed`);
