// Validates Kubernetes manifests (multi-document YAML) against the
// Kubernetes API schema, offline, for scripts/test-k8s.
//
//   node validate.mjs FILE.yaml [--shard-count-env NAME] [--self-test]
//
// The schema: the npm package kubernetes-models, whose models and JSON-schema
// validators (ajv) are generated from the Kubernetes OpenAPI definitions;
// each document is validated as the model of its apiVersion and kind. That
// checks types, formats, enums and required fields. Two more checks:
//
// - Unknown fields. The OpenAPI definitions do not forbid extra fields (the
//   API server does, with strict field validation), so every field of the
//   document is probed: its value is replaced by one no schema accepts (a
//   Symbol), and a field the schema knows then fails validation at its own
//   path; a field that does not fail there is not in the schema (a typo,
//   or a field of another API version).
// - The cross-field rules that the Job API states in its field descriptions
//   (quoted in jobRules below), which a JSON schema cannot express, and this
//   project's own rule that the shard-count variable equals completions.
//
// --self-test also checks that known-bad variants of the first Job of FILE
// are rejected, each for the expected reason: the validator is not a no-op.
import { readFileSync } from "node:fs";
import { parseAllDocuments } from "yaml";

const args = process.argv.slice(2);
const file = args.find((a) => !a.startsWith("--"));
const selfTest = args.includes("--self-test");
const envIdx = args.indexOf("--shard-count-env");
const shardEnv = envIdx >= 0 ? args[envIdx + 1] : null;
if (!file) {
  console.error("usage: node validate.mjs FILE.yaml [--shard-count-env NAME] [--self-test]");
  process.exit(2);
}

// modelFor imports the kubernetes-models class of apiVersion/kind.
async function modelFor(apiVersion, kind) {
  if (typeof apiVersion !== "string" || typeof kind !== "string") {
    throw new Error("apiVersion and kind are required");
  }
  let mod;
  try {
    mod = await import(`kubernetes-models/${apiVersion}`);
  } catch {
    throw new Error(`apiVersion ${apiVersion} is not a Kubernetes API version known to the schema`);
  }
  if (typeof mod[kind] !== "function") {
    throw new Error(`kind ${kind} is not in ${apiVersion}`);
  }
  return mod[kind];
}

// schemaErrors validates obj as the model and returns ajv's errors.
function schemaErrors(Model, obj) {
  try {
    new Model(obj).validate();
    return [];
  } catch (e) {
    if (Array.isArray(e.errors)) return e.errors;
    throw e;
  }
}

// fieldPaths lists the JSON pointers of every object key in v.
function fieldPaths(v, prefix = "", out = []) {
  if (Array.isArray(v)) {
    v.forEach((x, i) => fieldPaths(x, `${prefix}/${i}`, out));
  } else if (v && typeof v === "object") {
    for (const k of Object.keys(v)) {
      const p = `${prefix}/${k.replaceAll("~", "~0").replaceAll("/", "~1")}`;
      out.push(p);
      fieldPaths(v[k], p, out);
    }
  }
  return out;
}

// withValue returns a deep copy of obj with the value at pointer replaced.
function withValue(obj, pointer, value) {
  const copy = structuredClone(obj);
  const keys = pointer.split("/").slice(1).map((k) => k.replaceAll("~1", "/").replaceAll("~0", "~"));
  let cur = copy;
  for (const k of keys.slice(0, -1)) cur = cur[k];
  cur[keys.at(-1)] = value;
  return copy;
}

function unknownFields(Model, obj) {
  const unknown = [];
  for (const p of fieldPaths(obj)) {
    if (p === "/apiVersion" || p === "/kind") continue;
    const errs = schemaErrors(Model, withValue(obj, p, Symbol("probe")));
    if (!errs.some((e) => e.instancePath === p || e.instancePath.startsWith(p + "/"))) {
      unknown.push(p);
    }
  }
  // A field inside an unknown one is reported once, by its parent.
  return unknown.filter((p) => !unknown.some((q) => p.startsWith(q + "/")));
}

// jobRules are the cross-field rules of the Job API, quoted from its field
// descriptions, for a batch/v1 Job.
function jobRules(job) {
  const errs = [];
  const spec = job.spec ?? {};
  const pod = spec.template?.spec ?? {};
  const restart = pod.restartPolicy;
  const containers = [...(pod.containers ?? []), ...(pod.initContainers ?? [])];
  const rule = (ok, path, text) => {
    if (!ok) errs.push(`${path}: ${text}`);
  };
  // JobSpec.template: "The only allowed template.spec.restartPolicy values
  // are "Never" or "OnFailure"."
  rule(restart === "Never" || restart === "OnFailure", "/spec/template/spec/restartPolicy",
    'the only allowed values for a Job are "Never" or "OnFailure"');
  // backoffLimitPerIndex: "It can only be set when Job's
  // completionMode=Indexed, and the Pod's restart policy is Never."
  if (spec.backoffLimitPerIndex != null) {
    rule(spec.completionMode === "Indexed" && restart === "Never", "/spec/backoffLimitPerIndex",
      "can only be set when completionMode=Indexed and the Pod's restart policy is Never");
  }
  // maxFailedIndexes: "It can only be specified when backoffLimitPerIndex is
  // set. It can be null or up to completions."
  if (spec.maxFailedIndexes != null) {
    rule(spec.backoffLimitPerIndex != null, "/spec/maxFailedIndexes", "can only be specified when backoffLimitPerIndex is set");
    rule(spec.completions == null || spec.maxFailedIndexes <= spec.completions, "/spec/maxFailedIndexes", "can be null or up to completions");
  }
  // podFailurePolicy: "This field cannot be used in combination with
  // restartPolicy=OnFailure."
  const rules = spec.podFailurePolicy?.rules ?? [];
  if (spec.podFailurePolicy) {
    rule(restart !== "OnFailure", "/spec/podFailurePolicy", "cannot be used in combination with restartPolicy=OnFailure");
  }
  rules.forEach((r, i) => {
    const at = `/spec/podFailurePolicy/rules/${i}`;
    // PodFailurePolicyRule: "One of onExitCodes and onPodConditions, but not
    // both, can be used in each rule."
    rule((r.onExitCodes != null) !== (r.onPodConditions != null), at, "one of onExitCodes and onPodConditions, but not both");
    // action FailIndex: "This action can only be used when
    // backoffLimitPerIndex is set."
    if (r.action === "FailIndex") {
      rule(spec.backoffLimitPerIndex != null, `${at}/action`, "FailIndex can only be used when backoffLimitPerIndex is set");
    }
    const ec = r.onExitCodes;
    if (ec) {
      // containerName: "When specified, it should match one the container
      // or initContainer names in the pod template."
      if (ec.containerName != null) {
        rule(containers.some((c) => c.name === ec.containerName), `${at}/onExitCodes/containerName`,
          `${ec.containerName} matches no container or initContainer of the pod template`);
      }
      // values: "The list of values must be ordered and must not contain
      // duplicates. Value '0' cannot be used for the In operator. At least
      // one element is required. At most 255 elements are allowed."
      const v = ec.values ?? [];
      rule(v.length >= 1 && v.length <= 255, `${at}/onExitCodes/values`, "1 to 255 elements");
      rule(v.every((x, j) => j === 0 || v[j - 1] < x), `${at}/onExitCodes/values`, "must be ordered and must not contain duplicates");
      if (ec.operator === "In") rule(!v.includes(0), `${at}/onExitCodes/values`, "value 0 cannot be used for the In operator");
    }
  });
  // Container.name: "Name of the container specified as a DNS_LABEL."
  containers.forEach((c, i) => {
    rule(typeof c.name === "string" && /^[a-z0-9]([-a-z0-9]*[a-z0-9])?$/.test(c.name) && c.name.length <= 63,
      `/spec/template/spec/containers/${i}/name`, "must be a DNS label (RFC 1123)");
  });
  // This project: the shard count of an Indexed Job's pods equals completions.
  if (shardEnv && spec.completionMode === "Indexed") {
    for (const c of pod.containers ?? []) {
      const e = (c.env ?? []).find((x) => x.name === shardEnv);
      rule(e != null && String(e.value) === String(spec.completions), `/spec/template/spec/containers/${c.name}/env/${shardEnv}`,
        `must equal completions (${spec.completions}), is ${e ? JSON.stringify(e.value) : "missing"}`);
    }
  }
  return errs;
}

// problems lists everything wrong with one document.
async function problems(obj) {
  let Model;
  try {
    Model = await modelFor(obj?.apiVersion, obj?.kind);
  } catch (e) {
    return [e.message];
  }
  const out = schemaErrors(Model, obj).map((e) => `${e.instancePath || "/"}: ${e.message}${e.params?.allowedValues ? " " + JSON.stringify(e.params.allowedValues) : ""}`);
  for (const p of unknownFields(Model, obj)) out.push(`${p}: field not in the ${obj.apiVersion} ${obj.kind} schema`);
  if (obj.apiVersion === "batch/v1" && obj.kind === "Job") out.push(...jobRules(obj));
  return out;
}

const docs = parseAllDocuments(readFileSync(file, "utf8"));
let failed = false;
const objs = [];
for (const d of docs) {
  if (d.errors.length) {
    console.error(`${file}: YAML error: ${d.errors[0].message}`);
    failed = true;
    continue;
  }
  const obj = d.toJS();
  if (obj == null) continue;
  objs.push(obj);
  const p = await problems(obj);
  const name = `${obj.kind ?? "?"} ${obj.metadata?.name ?? "?"}`;
  if (p.length) {
    failed = true;
    for (const x of p) console.error(`${file}: ${name}: ${x}`);
  } else {
    console.log(`${file}: ${name} (${obj.apiVersion}): valid against the schema, no unknown field, Job API rules met`);
  }
}
if (objs.length === 0) {
  console.error(`${file}: no document`);
  failed = true;
}

if (selfTest && !failed) {
  const job = objs.find((o) => o.kind === "Job" && o.spec?.completionMode === "Indexed");
  if (!job) {
    console.error("--self-test: no Indexed Job in the file");
    process.exit(1);
  }
  const del = (o, f) => {
    f(o);
    return o;
  };
  const bad = [
    ["a misspelled field", del(structuredClone(job), (o) => { o.spec.backofLimitPerIndex = 2; }), "/spec/backofLimitPerIndex: field not in"],
    ["a misspelled nested field", del(structuredClone(job), (o) => { o.spec.template.spec.containers[0].envv = []; }), "/spec/template/spec/containers/0/envv: field not in"],
    ["a value outside an enum", del(structuredClone(job), (o) => { o.spec.completionMode = "Indexd"; }), "/spec/completionMode: must be equal to one of the allowed values"],
    ["a string for an integer", del(structuredClone(job), (o) => { o.spec.parallelism = "25"; }), "/spec/parallelism: must be integer"],
    ["a missing required field", del(structuredClone(job), (o) => { delete o.spec.template; }), "/spec: must have required property template"],
    ["an unknown kind", del(structuredClone(job), (o) => { o.kind = "IndexedJob"; }), "kind IndexedJob is not in batch/v1"],
    ["FailIndex without backoffLimitPerIndex", del(structuredClone(job), (o) => { delete o.spec.backoffLimitPerIndex; delete o.spec.maxFailedIndexes; }), "FailIndex can only be used when backoffLimitPerIndex is set"],
    ["restartPolicy OnFailure with a pod failure policy", del(structuredClone(job), (o) => { o.spec.template.spec.restartPolicy = "OnFailure"; }), "cannot be used in combination with restartPolicy=OnFailure"],
    ["a shard count other than completions", del(structuredClone(job), (o) => { o.spec.completions = 50; o.spec.maxFailedIndexes = 50; }), `${shardEnv ?? "VOXGAMMA_SHARD_COUNT"}: must equal completions`],
  ];
  for (const [what, obj, want] of bad) {
    const p = await problems(obj);
    if (!p.some((x) => x.includes(want))) {
      console.error(`--self-test: ${what} was not rejected as expected ("${want}"); got: ${JSON.stringify(p)}`);
      failed = true;
    }
  }
  if (!failed) console.log(`--self-test: ${bad.length} known-bad variants of Job ${job.metadata.name} rejected, each for its reason`);
}
process.exit(failed ? 1 : 0);
