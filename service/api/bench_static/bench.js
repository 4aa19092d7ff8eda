// The oxyrule bench: lays out what the service answers. No physiology and no rule is computed
// here: every verdict, number, chart and what-if comes from the service's /bench/api calls.
// The case stays in this page (state.input) and is sent with each call; nothing is stored.

const state = { input: null, expected: null, name: "", units: "mm[Hg]", whatIf: {},
  fields: null, seq: 0, timer: null, blocks: {} };
const $ = (id) => document.getElementById(id);

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [key, value] of Object.entries(attrs)) {
    if (value === null || value === undefined || value === false) continue;
    if (key === "class") node.className = value;
    else if (key.startsWith("on")) node.addEventListener(key.slice(2), value);
    else node.setAttribute(key, value === true ? "" : String(value));
  }
  for (const child of children.flat()) {
    if (child === null || child === undefined) continue;
    node.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return node;
}

function fill(node, ...children) {
  // Like replaceChildren, leaving out the parts that are not there (null).
  node.replaceChildren(...children.flat().filter((c) => c !== null && c !== undefined));
}

function svgNode(markup) {
  // The charts are drawn by the service (hand-written SVG, every text escaped there).
  const parsed = new DOMParser().parseFromString(markup, "image/svg+xml").documentElement;
  return document.importNode(parsed, true);
}

function say(text, error = false) {
  const status = $("status");
  status.textContent = text;
  status.classList.toggle("error", error);
}

async function api(path, body) {
  const options = { credentials: "same-origin", headers: { Accept: "application/json" } };
  if (body !== undefined) {
    options.method = "POST";
    options.headers["Content-Type"] = "application/json";
    options.body = JSON.stringify(body);
  }
  const answer = await fetch(path, options);
  const data = await answer.json().catch(() => null);
  if (!answer.ok) {
    const issues = (data && data.issue) || [];
    const words = issues.map((i) => i.diagnostics).filter(Boolean).join("; ");
    throw new Error(words || `the service answered ${answer.status}`);
  }
  return data;
}

function table(headers, rows, caption) {
  return el("table", {},
    caption ? el("caption", {}, caption) : null,
    el("thead", {}, el("tr", {}, headers.map((h) => el("th", { scope: "col" }, h)))),
    el("tbody", {}, rows.map((cells) => el("tr", {}, cells.map((c) =>
      c && c.num !== undefined ? el("td", { class: "num" }, c.num) : el("td", {}, c))))));
}

const GRADE_MARK = { likely: "●●", possible: "●○", unlikely: "○○", "not-assessable": "–" };
const STATUS_MARK = { passed: "✓ passed", failed: "✗ FAILED", "known-gap": "◐ known gap",
  "gap-closed": "! gap closed" };

// --- The case -----------------------------------------------------------------------------

function isExpected(name, text) {
  return /\.expected\.ya?ml$/i.test(name) || /^\s*description\s*:/m.test(text.slice(0, 400))
    && !/^\s*[{M]/.test(text);
}

async function loadFiles(files) {
  let input = null, expected = null, name = "";
  for (const file of files) {
    const text = await file.text();
    if (isExpected(file.name, text)) expected = text;
    else { input = text; name = file.name; }
  }
  if (input === null) { say("No case among the files: drop a Bundle or an HL7 v2 message.", true); return; }
  setCase(input, expected, name);
}

function setCase(input, expected, name) {
  state.input = input;
  state.expected = expected;
  state.name = name;
  state.whatIf = {};
  state.fields = null;
  $("paste").value = input;
  $("expected-text").value = expected || "";
  const stem = name.replace(/\.(bundle\.json|json|hl7|er7|txt)$/i, "");
  if (stem) $("fixture-name").value = stem.replace(/[^a-z0-9]+/gi, "-").toLowerCase();
  assess();
}

function assessSoon() {
  clearTimeout(state.timer);
  state.timer = setTimeout(assess, 180);
}

async function assess() {
  if (state.input === null) return;
  const seq = ++state.seq;
  const started = performance.now();
  say("Assessing…");
  try {
    const view = await api("/bench/api/assess", { input: state.input, expected: state.expected,
      units: state.units, what_if: state.whatIf });
    if (seq !== state.seq) return; // a newer request is on its way
    render(view);
    const ms = Math.round(performance.now() - started);
    document.body.dataset.roundTripMs = String(ms);
    say(`Assessed (${view.kind === "hl7v2" ? "HL7 v2 message" : "FHIR Bundle"}, ${ms} ms).`);
  } catch (error) {
    if (seq === state.seq) say(`The case could not be assessed: ${error.message}`, true);
  }
}

// --- Rendering ----------------------------------------------------------------------------

function render(view) {
  for (const id of ["verdict", "whatif", "partition", "numbers", "trace", "save"]) $(id).hidden = false;
  renderVerdict(view);
  renderWhatIf(view.what_if);
  renderPartition(view.partition);
  renderCascade(view.cascade);
  renderOxygen(view.oxygen_response);
  renderNumbers(view.numbers);
  renderTrace(view);
}

function renderVerdict(view) {
  const v = view.verdict;
  $("case-name").textContent = state.name ? `Case: ${state.name}` : "";
  const list = $("verdict-list");
  fill(list,
    el("dt", {}, "Pattern"), el("dd", {}, el("span", { id: "pattern", class: "pattern" }, v.pattern)),
    el("dt", {}, "Why"), el("dd", { id: "why" }, v.why),
    el("dt", {}, "Hypoxaemia"), el("dd", {}, v.hypoxaemia),
    el("dt", {}, "Gas exchange for age"), el("dd", {}, v.gas_exchange),
    el("dt", {}, "Result status"), el("dd", {}, v.status),
    el("dt", {}, "Rule set"), el("dd", {}, view.ruleset),
    view.what_if.changed ? [el("dt", {}, "What if"), el("dd", { class: "changed" },
      "inputs changed from the case as sent (section 3)")] : null,
  );
  const body = $("mechanisms").tBodies[0];
  fill(body, ...v.mechanisms.map((m) => el("tr", { "data-mechanism": m.code },
    el("td", {}, m.name),
    el("td", {}, el("span", { class: `grade grade-${m.grade}`, "data-grade": m.grade },
      `${GRADE_MARK[m.grade] || ""} ${m.grade}`)),
    el("td", {}, m.rationale),
    el("td", {}, m.discriminator || "—"),
    el("td", {}, m.rules.length ? m.rules.map((r) => el("div", {}, el("code", {}, r))) : "—"))));
  fill($("findings"), v.findings.length
    ? table(["Severity", "Code", "Message", "Rule"], v.findings.map((f) =>
      [f.severity, el("code", {}, f.code), f.message, f.rule ? el("code", {}, f.rule) : "—"]))
    : el("p", { class: "muted" }, "No findings."));
  const split = v.data_requested_split;
  fill($("requested"),
    split.not_sent.length ? el("p", {}, el("strong", {}, "Not sent, would settle an open question: "),
      split.not_sent.join(", ")) : null,
    split.again.length ? el("p", {}, el("strong", {}, "Sent, and worth repeating (as the discriminators say): "),
      split.again.join(", ")) : null);
  const u = view.uncertain_inputs;
  fill($("uncertain"), u.inputs.length ? el("div", {},
    el("h3", {}, "Known only as a range (assessed at each end)"),
    el("ul", {}, u.inputs.map((w) => el("li", {}, w))),
    table(["Mechanism", "Grade", "How it depended"], u.grades.map((g) => [g.mechanism, g.grade, g.how])))
    : null);
  const check = view.expected;
  const box = $("expected-check");
  if (!check) { fill(box); return; }
  if (check.error) { fill(box, el("p", { class: "failed" }, check.error)); return; }
  fill(box,
    el("p", {}, "Expected outcome: ",
      el("span", { id: "expected-status", class: check.status }, STATUS_MARK[check.status] || check.status),
      ` — ${check.description}`),
    check.mismatches.length ? table(["What", "Expected", "Got", "Unit"],
      check.mismatches.map((m) => [m.what, m.expected, m.got, m.unit]), "What differed") : null);
}

function renderWhatIf(whatIf) {
  const form = $("whatif-form");
  const focused = document.activeElement && document.activeElement.id;
  if (!state.fields) {
    state.fields = whatIf.fields;
    fill(form, ...whatIf.fields.map(whatIfField));
  }
  for (const f of whatIf.fields) {
    const changed = f.key in state.whatIf;
    $(`wi-${f.key}-sent`).textContent = f.sent === null ? "not sent" : `as sent: ${f.sent} ${f.unit}`.trim();
    $(`wi-${f.key}-now`).textContent = f.value === null ? "" : `assessed at ${f.value} ${f.unit}`.trim();
    $(`wi-${f.key}-on`).checked = changed;
    if (!changed && f.value !== null && focused !== `wi-${f.key}-range` && focused !== `wi-${f.key}-number`) {
      $(`wi-${f.key}-range`).value = f.value;
      $(`wi-${f.key}-number`).value = f.value;
    }
    $(`wi-${f.key}`).classList.toggle("changed", changed);
  }
}

function whatIfField(f) {
  const id = `wi-${f.key}`;
  const start = f.value ?? f.start;
  const set = (value) => {
    if (value === "" || Number.isNaN(Number(value))) return;
    $(`${id}-range`).value = value;
    $(`${id}-number`).value = value;
    state.whatIf[f.key] = Number(value);
    if (f.key === "altitude_m") delete state.whatIf.barometric_pressure_mmhg;
    if (f.key === "barometric_pressure_mmhg") delete state.whatIf.altitude_m;
    $(`${id}-on`).checked = true;
    assessSoon();
  };
  return el("fieldset", { id },
    el("legend", {}, `${f.label}${f.unit ? ` (${f.unit})` : ""}`),
    el("div", { class: "row" },
      el("input", { id: `${id}-on`, type: "checkbox", onchange: (e) => {
        if (e.target.checked) set($(`${id}-number`).value);
        else { delete state.whatIf[f.key]; assessSoon(); }
      } }),
      el("label", { for: `${id}-on` }, "change it")),
    el("label", { for: `${id}-range`, class: "sr" }, `${f.label} slider`),
    el("input", { id: `${id}-range`, type: "range", min: f.low, max: f.high, step: f.step, value: start,
      oninput: (e) => set(e.target.value) }),
    el("div", { class: "row" },
      el("label", { for: `${id}-number` }, "value"),
      el("input", { id: `${id}-number`, type: "number", min: f.low, max: f.high, step: f.step,
        value: start, onchange: (e) => set(e.target.value) }),
      el("span", { id: `${id}-sent`, class: "muted" }),
      el("span", { id: `${id}-now`, class: "muted" })));
}

function renderPartition(p) {
  const body = $("partition-body");
  if (!p.charts.length) {
    fill(body, el("p", { class: "muted" }, `Not computed: ${p.absent}.`));
    return;
  }
  fill(body, ...p.charts.map((c) => el("figure", {},
    c.assumption ? el("h3", {}, c.assumption) : null,
    svgNode(c.svg),
    el("figcaption", {}, `From the PaO2 expected for age (${c.expected} ${p.unit}) to the PaO2 `
      + `(${c.pao2} ${p.unit}): a fall of ${c.fall} ${p.unit}. ${c.method}.`),
    table(["Part", p.unit, "Share", "What it is"], c.rows.map((r) => [r.label, { num: r.value },
      r.value < 0 ? "raises it" : r.share === null ? "—" : `${Math.round(r.share * 100)}%`,
      r.meaning])))));
}

function renderCascade(c) {
  $("cascade").hidden = !c;
  if (!c) return;
  fill($("cascade-body"), el("figure", {}, svgNode(c.svg),
    el("figcaption", {}, `Normal cascade for ${c.conditions}.`,
      el("ul", {}, c.notes.map((n) => el("li", {}, n))))));
}

function quantityText(q) {
  if (!q) return "—";
  const unit = { "mm[Hg]": "mmHg", "1": "" }[q.code] ?? q.code;
  return `${q.code === "1" ? q.value.toFixed(2) : q.value} ${unit}`.trim();
}

function renderOxygen(o) {
  const fits = o.parameters.length + o.observations.length + (o.charts || []).length;
  const box = $("oxygen-body");
  $("oxygen-response").hidden = false;
  if (o.gases.length < 2 && !fits) {
    fill(box, el("p", { class: "muted" }, "One gas: the response to oxygen needs gases "
      + "on different FiO2. (A fitted oxygen-response curve, when the result carries one, is shown here.)"));
    return;
  }
  const rows = o.gases.map((g) => [g.index ? "index (latest)" : "earlier", g.observation || "—",
    { num: quantityText(g.fio2) }, { num: quantityText(g["pf-ratio"]) },
    { num: quantityText(g["aa-gradient"]) }, { num: quantityText(g["venous-admixture"]) }]);
  const gasTable = table(["Gas", "Observation", "FiO2", "P/F", "A-a gradient", "Venous admixture"],
    rows, "Each arterial gas of the case, from the result.");
  gasTable.classList.add("gases");
  fill(box,
    oxygenChart(o.gases),
    gasTable,
    ...(o.charts || []).map((c) => el("figure", {}, svgNode(c.svg), el("figcaption", {}, c.caption))),
    ...o.parameters.map((p) => el("div", {}, el("h3", {}, p.name),
      table(["Part", "Value"], (p.part || []).map((part) => [part.name, partValue(part)])))),
    ...o.observations.map((obs) => el("div", {}, el("h3", {}, obs.id),
      table(["Component", "Value"], (obs.component || []).map((c) =>
        [(c.code.coding || [{}])[0].code || "", quantityText(c.valueQuantity)])))));
}

const SVG = "http://www.w3.org/2000/svg";

function svg(tag, attrs, text) {
  const node = document.createElementNS(SVG, tag);
  for (const [key, value] of Object.entries(attrs)) node.setAttribute(key, String(value));
  if (text !== undefined) node.textContent = text;
  return node;
}

function oxygenChart(gases) {
  // The result's own numbers, placed: each gas at its FiO2, with its venous admixture (or its
  // P/F ratio when no admixture was computed). Nothing is computed here.
  const key = gases.some((g) => g["venous-admixture"]) ? "venous-admixture" : "pf-ratio";
  const points = gases.filter((g) => g.fio2 && g[key])
    .map((g) => ({ x: g.fio2.value, y: g[key].value, index: g.index }));
  if (points.length < 2) return null;
  const [w, h, left, bottom] = [520, 220, 56, 36];
  const top = Math.max(...points.map((p) => p.y)) * 1.15 || 1;
  const px = (x) => left + (x - 0.2) / 0.8 * (w - left - 70);
  const py = (y) => h - bottom - (y / top) * (h - bottom - 14);
  const label = key === "venous-admixture" ? "venous admixture (%)"
    : `P/F ratio (${quantityText(gases.find((g) => g[key])[key]).split(" ").pop()})`;
  const chart = svg("svg", { viewBox: `0 0 ${w} ${h}`, role: "img", class: "oxygen-chart",
    "aria-label": `Each gas's ${label} against its FiO2` });
  chart.append(svg("line", { x1: left, x2: w - 12, y1: h - bottom, y2: h - bottom, stroke: "#1f2a33" }));
  chart.append(svg("line", { x1: left, x2: left, y1: 8, y2: h - bottom, stroke: "#1f2a33" }));
  for (const f of [0.2, 0.4, 0.6, 0.8, 1.0]) {
    chart.append(svg("text", { x: px(f), y: h - bottom + 16, "text-anchor": "middle", "font-size": 11 }, f.toFixed(1)));
  }
  chart.append(svg("text", { x: (w + left) / 2, y: h - 4, "text-anchor": "middle", "font-size": 11 }, "FiO2"));
  chart.append(svg("text", { x: 12, y: 12, "font-size": 11 }, label));
  const ordered = [...points].sort((a, b) => a.x - b.x);
  chart.append(svg("polyline", { points: ordered.map((p) => `${px(p.x)},${py(p.y)}`).join(" "),
    fill: "none", stroke: "#1f2a33", "stroke-dasharray": "4 3" }));
  for (const p of points) {
    chart.append(svg(p.index ? "rect" : "circle", p.index
      ? { x: px(p.x) - 5, y: py(p.y) - 5, width: 10, height: 10, fill: "#1f2a33" }
      : { cx: px(p.x), cy: py(p.y), r: 5, fill: "white", stroke: "#1f2a33", "stroke-width": 2 }));
    chart.append(svg("text", { x: px(p.x) + 8, y: py(p.y) - 8, "font-size": 11 },
      `${p.y}${p.index ? " (latest)" : ""}`));
  }
  return el("figure", {}, chart, el("figcaption", {},
    `${label} of each gas against its FiO2, from the result: filled square the latest gas, `
    + "open circles the earlier ones."));
}

function partValue(part) {
  for (const [key, value] of Object.entries(part)) {
    if (!key.startsWith("value")) continue;
    if (key === "valueQuantity") return quantityText(value);
    if (typeof value === "object") return JSON.stringify(value);
    return String(value);
  }
  return (part.part || []).map((p) => `${p.name}: ${partValue(p)}`).join("; ");
}

function renderNumbers(numbers) {
  fill($("numbers-table").tBodies[0], ...numbers.map((n) => el("tr", {},
    el("td", {}, n.label), el("td", { class: "num" }, n.value), el("td", {}, n.unit),
    el("td", {}, n.method))));
}

const KIND_WORDS = { all: "all of", any: "any of", not: "not", definitely: "definitely" };

function treeNode(node) {
  const mark = el("span", { class: `state state-${node.state}` }, `[${node.state}]`);
  if (node.kind === "leaf") {
    return el("li", {}, mark, " ", el("code", {}, node.text),
      node.missing ? el("span", { class: "muted" }, ` (missing: ${node.missing})`) : null);
  }
  if (node.kind === "ref") {
    // A named block: its parts are given once (view.blocks), laid out when it is opened.
    const parts = el("ul", {});
    const details = el("details", {}, el("summary", {}, mark, " ", `block ${node.name}`), parts);
    details.addEventListener("toggle", () => {
      if (details.open && !parts.childElementCount) fill(parts, treeNode(state.blocks[node.name]));
    });
    return el("li", {}, details);
  }
  return el("li", {}, el("details", { open: true },
    el("summary", {}, mark, " ", KIND_WORDS[node.kind] || node.kind),
    el("ul", {}, (node.children || []).map(treeNode))));
}

function renderTrace(view) {
  state.blocks = view.blocks;
  fill($("deciding"), ...view.deciding.map((d) => el("details", { class: "rule", open: true },
    el("summary", { class: "rule-head" }, `${d.for} ← `, el("code", {}, d.rule)),
    d.note ? el("p", { class: "muted" }, d.note) : null,
    el("ul", { class: "tree" }, treeNode(d.tree)))));
  fill($("outranked"), view.outranked.length ? el("div", {},
    el("h3", {}, "Fired but outranked"),
    el("ul", {}, view.outranked.map((o) => el("li", {}, `${o.mechanism}: `, el("code", {}, o.rule),
      ` (${o.grade}, priority ${o.priority}) lost to ${o.outranked_by.join(", ")} `
      + `(priority ${o.winning_priority})`)))) : null);
  fill($("all-rules-body"), ...view.rules.map((r) => el("details", { class: "rule" },
    el("summary", {}, el("span", { class: `state state-${r.state}` }, `[${r.state}]`), " ",
      el("code", {}, r.rule), ` ${r.title}`, r.role ? ` — ${r.role}` : "",
      r.shadow ? " (testing: reported only)" : ""),
    el("ul", { class: "tree" }, treeNode(r.tree)))));
}

// --- Fixtures -----------------------------------------------------------------------------

async function runFixtures() {
  $("fixtures-summary").textContent = "Running the fixtures…";
  try {
    const run = await api("/bench/api/fixtures");
    $("fixtures-summary").textContent = run.summary;
    const cases = [...run.cases].sort((a, b) => Number(a.passed) - Number(b.passed));
    const body = $("fixtures-table").tBodies[0];
    fill(body, ...cases.map((c) => el("tr", { "data-status": c.status },
      el("td", {}, el("code", {}, c.name), el("div", { class: "muted" }, c.description)),
      el("td", {}, el("span", { class: c.status }, STATUS_MARK[c.status] || c.status)),
      el("td", {}, c.pattern || "—"),
      el("td", {}, c.error ? `input rejected: ${c.error}` : c.mismatches.length
        ? table(["What", "Expected", "Got", "Unit"], c.mismatches.map((m) => [m.what, m.expected, m.got, m.unit]))
        : "—"),
      el("td", {}, el("button", { type: "button", onclick: () => openFixture(c.name) },
        "Open", el("span", { class: "sr" }, ` ${c.name}`))))));
    $("fixtures-table").hidden = false;
  } catch (error) {
    $("fixtures-summary").textContent = `The fixtures could not be run: ${error.message}`;
  }
}

async function openFixture(name) {
  try {
    const found = await api(`/bench/api/fixture?name=${encodeURIComponent(name)}`);
    setCase(found.input, found.expected, `${name.split("/").pop()}.bundle.json`);
    $("verdict").scrollIntoView();
  } catch (error) { say(error.message, true); }
}

async function makeFixture() {
  const list = $("fixture-files");
  fill(list, el("li", {}, "Making the files…"));
  try {
    const made = await api("/bench/api/fixture", { input: state.input, what_if: state.whatIf,
      units: state.units, name: $("fixture-name").value, description: $("fixture-description").value });
    fill(list, ...made.files.map((f) => {
      const type = f.name.endsWith(".json") ? "application/fhir+json" : "application/yaml";
      const href = URL.createObjectURL(new Blob([f.text], { type }));
      return el("li", {}, el("a", { href, download: f.name, class: "download" }, `Download ${f.name}`),
        el("details", {}, el("summary", {}, "show"), el("pre", { class: "mono" }, f.text)));
    }));
  } catch (error) {
    fill(list, el("li", { class: "failed" }, error.message));
  }
}

// --- Start --------------------------------------------------------------------------------

async function start() {
  const drop = $("drop");
  drop.addEventListener("dragover", (e) => { e.preventDefault(); drop.classList.add("over"); });
  drop.addEventListener("dragleave", () => drop.classList.remove("over"));
  drop.addEventListener("drop", (e) => {
    e.preventDefault();
    drop.classList.remove("over");
    loadFiles([...e.dataTransfer.files]);
  });
  drop.addEventListener("keydown", (e) => { if (e.key === "Enter") $("files").click(); });
  $("files").addEventListener("change", (e) => loadFiles([...e.target.files]));
  $("assess-paste").addEventListener("click", () =>
    setCase($("paste").value, $("expected-text").value || null, "pasted case"));
  $("units").addEventListener("change", (e) => {
    state.units = e.target.value;
    state.whatIf = {};
    state.fields = null;
    assess();
  });
  $("whatif-reset").addEventListener("click", () => { state.whatIf = {}; state.fields = null; assess(); });
  $("run-fixtures").addEventListener("click", runFixtures);
  $("make-fixture").addEventListener("click", makeFixture);
  $("load-scenario").addEventListener("click", async () => {
    try {
      const found = await api(`/bench/api/scenario?name=${encodeURIComponent($("scenario").value)}`);
      setCase(found.input, null, `${found.name}.bundle.json`);
    } catch (error) { say(error.message, true); }
  });
  try {
    const info = await api("/bench/api/info");
    $("ruleset").textContent = `Rule set ${info.ruleset} — ${info.ruleset_title}`;
    if (info.site) {
      const changes = info.site.parameters.map((p) => `${p.name} ${p.site} ${p.unit} (rule set: ${p.rule_set})`)
        .concat(Object.entries(info.site.settings).map(([k, v]) => `${k} ${v}`));
      $("site").textContent = `Site file in force: ${info.site.label}`
        + (changes.length ? ` — ${changes.join("; ")}` : "");
      $("site").hidden = false;
    }
    $("caution").textContent = info.caution;
    $("caution-foot").textContent = info.caution;
    state.units = info.units;
    $("units").value = info.units;
    fill($("scenario"), ...info.scenarios.map((s) => el("option", { value: s.name }, `${s.label} (invented)`)));
    $("fixtures-where").textContent = info.fixtures.length ? `from ${info.fixtures.join(", ")}` : "no fixture folder found";
    document.body.dataset.ready = "true";
  } catch (error) { say(`The bench could not reach the service: ${error.message}`, true); }
}

start();
