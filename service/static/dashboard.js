// trailcast dashboard: plain JavaScript, no library; every request goes to this service.
"use strict";

// The invented demo comet (the same as examples/demo-comet.json).
const DEMO_ORBIT = {
  name: "P/2026 W3 (Hollow Pine) [invented demo comet]",
  epoch: "2026-11-20T00:00:00 TDB",
  q: 0.953,
  e: 0.828,
  i: 38.5,
  node: 21.6,
  peri: 204.2,
  tp: "2026-10-30T06:00:00 TDB",
};
// dynamics.orbit_input.ORBIT_KEYS, in its order (the API's message lists them so).
const ORBIT_KEYS = ["name", "epoch", "q", "e", "i", "node", "peri", "tp", "nongrav", "m1", "k1", "covariance", "solutions", "ejection_events", "observed_perihelia", "a", "mean_anomaly", "n"];
const POLL_MS = 700;
const $ = (sel, root = document) => root.querySelector(sel);

// ---------------------------------------------------------------------------------------------
// Validation: the API's own checks and messages, in the API's order, so that a refused form
// reads exactly as the service would answer (service/routers/forecasts.py, dynamics/orbit_input.py).

/** Python's repr() of a float, as the API's messages print numbers. */
function pyFloat(x) {
  if (x === 0) return Object.is(x, -0) ? "-0.0" : "0.0";
  const [mant, expText] = x.toExponential().split("e");
  const exp = parseInt(expText, 10);
  if (exp < -4 || exp >= 16) {
    const a = Math.abs(exp);
    return `${mant}e${exp < 0 ? "-" : "+"}${a < 10 ? "0" + a : a}`;
  }
  const neg = x < 0;
  const digits = mant.replace("-", "").replace(".", "");
  let s;
  if (exp >= 0) {
    s = digits.length <= exp + 1
      ? digits + "0".repeat(exp + 1 - digits.length) + ".0"
      : digits.slice(0, exp + 1) + "." + digits.slice(exp + 1);
  } else {
    s = "0." + "0".repeat(-exp - 1) + digits;
  }
  return (neg ? "-" : "") + s;
}

function pyType(v) {
  if (typeof v === "string") return "str";
  if (typeof v === "boolean") return "bool";
  if (Array.isArray(v)) return "list";
  if (v === null) return "NoneType";
  return typeof v === "object" ? "dict" : typeof v;
}

const isObject = (v) => v !== null && typeof v === "object" && !Array.isArray(v);

/** Pydantic's integer check: the message for the first failure, or null. */
function intProblem(v) {
  if (typeof v === "number" && Number.isFinite(v)) {
    return Number.isInteger(v) ? null : "Input should be a valid integer, got a number with a fractional part";
  }
  if (typeof v === "string") {
    return /^\s*[+-]?\d+\s*$/.test(v) ? null : "Input should be a valid integer, unable to parse string as an integer";
  }
  return "Input should be a valid integer";
}

class Invalid extends Error {
  constructor(field, message) {
    super(`${field}: ${message}`);
    this.field = field;
  }
}

/** Throws Invalid with the API's field and message for the first problem it would report. */
function validateBody(body) {
  // Request schema (pydantic), in field order: orbit, years, particles, options.
  if (!isObject(body.orbit)) throw new Invalid("orbit", "Input should be a valid dictionary");
  if (!Array.isArray(body.years)) throw new Invalid("years", "Input should be a valid list");
  if (body.years.length < 1) throw new Invalid("years", "List should have at least 1 item after validation, not 0");
  if (body.years.length > 2) throw new Invalid("years", `List should have at most 2 items after validation, not ${body.years.length}`);
  body.years.forEach((y, k) => {
    const p = intProblem(y);
    if (p) throw new Invalid(`years.${k}`, p);
  });
  if (body.particles !== undefined && body.particles !== null) {
    const p = intProblem(body.particles);
    if (p) throw new Invalid("particles", p);
    if (body.particles < 3) throw new Invalid("particles", "Input should be greater than or equal to 3");
    if (body.particles > 100000) throw new Invalid("particles", "Input should be less than or equal to 100000");
  }
  const o = body.options || {};
  if (o.trails !== undefined) {
    if (o.trails.length < 1) throw new Invalid("options.trails", "List should have at least 1 item after validation, not 0");
    o.trails.forEach((t, k) => {
      const p = intProblem(t);
      if (p) throw new Invalid(`options.trails.${k}`, p);
    });
  }
  if (o.max_trail_age_years !== undefined) {
    const a = o.max_trail_age_years;
    if (typeof a !== "number" || !Number.isFinite(a)) throw new Invalid("options.max_trail_age_years", "Input should be a valid number");
    if (!(a > 0)) throw new Invalid("options.max_trail_age_years", "Input should be greater than 0");
    if (a > 5000) throw new Invalid("options.max_trail_age_years", "Input should be less than or equal to 5000");
  }
  // The orbit (dynamics.orbit_input.parse_orbit, fields prefixed "orbit.").
  const orbit = body.orbit;
  const unknown = Object.keys(orbit).filter((k) => !ORBIT_KEYS.includes(k)).sort();
  if (unknown.length) throw new Invalid(`orbit.${unknown[0]}`, `unknown key; expected some of ${ORBIT_KEYS.join(", ")}`);
  // a bound orbit may be placed by a and the mean anomaly instead of q and tp
  const given = (k) => k in orbit && orbit[k] !== null;
  const byMeanAnomaly = ["a", "mean_anomaly", "n"].some(given);
  const placed = byMeanAnomaly ? ["a", "mean_anomaly"] : ["q", "tp"];
  if (byMeanAnomaly) {
    const both = ["q", "tp"].filter(given);
    if (both.length) throw new Invalid(`orbit.${both[0]}`, "give either q and tp, or a and mean_anomaly (with n as a check), not both");
  }
  for (const k of ["name", "epoch", placed[0], "e", "i", "node", "peri", placed[1]]) {
    if (!given(k)) throw new Invalid(`orbit.${k}`, "missing (required)");
  }
  if (typeof orbit.name !== "string" || !orbit.name.trim()) throw new Invalid("orbit.name", "must be a non-empty string");
  if (orbit.name.length > 200) throw new Invalid("orbit.name", "longer than 200 characters");
  for (const k of ["e", placed[0], "i", "node", "peri"]) {
    if (typeof orbit[k] !== "number") throw new Invalid(`orbit.${k}`, `expected a number, got ${pyType(orbit[k])}`);
  }
  const { e, i, node, peri } = orbit;
  if (byMeanAnomaly && !(e >= 0 && e < 1)) throw new Invalid("orbit.a", `a semi-major axis and mean anomaly place a bound orbit (0 <= e < 1, got e = ${pyFloat(e)}); give q and tp for parabolic and hyperbolic orbits`);
  if (byMeanAnomaly && orbit.a <= 0) throw new Invalid("orbit.a", `semi-major axis must be > 0 au, got ${pyFloat(orbit.a)}`);
  const q = byMeanAnomaly ? orbit.a * (1 - e) : orbit.q;
  if (q <= 0) throw new Invalid(`orbit.${placed[0]}`, `perihelion distance must be > 0 au, got ${pyFloat(q)}`);
  if (e < 0) throw new Invalid("orbit.e", `eccentricity must be >= 0, got ${pyFloat(e)}`);
  if (e > 100) throw new Invalid("orbit.e", "eccentricity above 100.0 is not a comet orbit");
  if (!(i >= 0 && i <= 180)) throw new Invalid("orbit.i", `inclination must be in [0, 180] deg, got ${pyFloat(i)}`);
  if (!(node >= 0 && node < 360)) throw new Invalid("orbit.node", `longitude of the ascending node must be in [0, 360) deg, got ${pyFloat(node)}`);
  if (!(peri >= 0 && peri < 360)) throw new Invalid("orbit.peri", `argument of perihelion must be in [0, 360) deg, got ${pyFloat(peri)}`);
  // Years against the ephemeris span, then their order (the service checks its own limits after).
  const years = body.years.map(Number);
  years.forEach((y, k) => {
    if (!(y >= 1800 && y <= 2199)) throw new Invalid(`years.${k}`, `${y} lies outside 1800-2199 (the DE423 ephemeris span)`);
  });
  const first = years[0];
  const last = years[years.length - 1];
  if (last < first) throw new Invalid("years", `last (${last}) precedes first (${first})`);
}

// ---------------------------------------------------------------------------------------------
// Small helpers

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === undefined || v === null) continue;
    if (k === "class") node.className = v;
    else node.setAttribute(k, v);
  }
  for (const c of children) node.append(c instanceof Node ? c : document.createTextNode(String(c)));
  return node;
}

function fmt(x, digits) {
  return typeof x === "number" && Number.isFinite(x) ? x.toFixed(digits) : "–";
}

function zhrText(z) {
  if (!z || typeof z !== "object") return "–";
  const g = (v) => (typeof v === "number" ? String(+v.toPrecision(3)) : "?");
  return `${g(z.estimate)} (${g(z.low)}–${g(z.high)})`;
}

function utcText(iso) {
  return iso ? iso.replace("T", " ").replace("Z", "") : "–";
}

/** An activity window, short: "07:30–09:30" on the peak's day, dates only where they differ. */
function windowText(w, peakIso) {
  if (!w) return "–";
  const [d0, t0] = utcText(w.start_utc).split(" ");
  const [d1, t1] = utcText(w.end_utc).split(" ");
  const day = (peakIso || "").slice(0, 10);
  const hm = (t) => t.slice(0, 5);
  if (d0 === day && d1 === day) return `${hm(t0)}–${hm(t1)}`;
  return `${d0} ${hm(t0)} – ${d1} ${hm(t1)}`;
}

/**
 * Give each cell of a table's body the text of its column heading (data-label), which the
 * phone layout shows beside the value when the rows become stacked cards.
 */
function labelCells(table) {
  const heads = [...table.querySelectorAll("thead th")].map((th) => th.textContent.trim());
  for (const tr of table.querySelectorAll("tbody tr")) {
    [...tr.children].forEach((td, k) => {
      if (heads[k] && !td.hasAttribute("colspan")) td.dataset.label = heads[k];
    });
  }
}

async function getJson(url) {
  const r = await fetch(url, { headers: { Accept: "application/json" } });
  const body = await r.json().catch(() => null);
  if (!r.ok) {
    const detail = body && body.detail ? body.detail : `${r.status} ${r.statusText}`;
    throw new Error(detail);
  }
  return body;
}

// ---------------------------------------------------------------------------------------------
// Views and routing: #/upcoming, #/submit, #/forecasts/<id>

let pollTimer = null;

function showView(name) {
  for (const v of ["upcoming", "forecast", "submit"]) {
    $(`#view-${v}`).hidden = v !== name;
  }
  for (const v of ["upcoming", "submit"]) {
    const a = $(`#nav-${v}`);
    if (v === name) a.setAttribute("aria-current", "page");
    else a.removeAttribute("aria-current");
  }
}

function route() {
  if (pollTimer) {
    clearTimeout(pollTimer);
    pollTimer = null;
  }
  const hash = location.hash || "#/upcoming";
  const m = hash.match(/^#\/forecasts\/([0-9a-f]{32})$/);
  if (m) {
    showView("forecast");
    openForecast(m[1]);
  } else if (hash === "#/submit") {
    showView("submit");
  } else {
    showView("upcoming");
    loadUpcoming();
  }
}

// ---------------------------------------------------------------------------------------------
// Upcoming encounters

const upcoming = { rows: [], key: "peak", dir: 1, hidden: 0 };
/** Forecast id -> {options, finished} (a done forecast never changes: fetched once). */
const forecastMeta = new Map();
/** At most this many forecast look-ups at once (the service runs on a few cores). */
const META_PARALLEL = 4;

function upcomingRange() {
  const n = Math.max(1, Math.min(175, parseInt($("#upcoming-years").value, 10) || 20));
  const today = new Date().toISOString().slice(0, 10);
  const lastYear = Math.min(2199, new Date().getUTCFullYear() + n);
  return { from: today, to: `${lastYear}-12-31` };
}

async function loadUpcoming() {
  const { from, to } = upcomingRange();
  const query = new URLSearchParams({ from, to });
  $("#upcoming-ics").href = `/v1/encounters.ics?${query}`;
  $("#upcoming-status").textContent = "Loading…";
  const rows = [];
  try {
    // include_superseded=true: every stored forecast's encounters (the listing otherwise
    // keeps only the latest forecast per parent and option set). The page marks the older
    // ones itself and shows them when asked.
    let url = `/v1/encounters?${query}&include_superseded=true&limit=500`;
    while (url) {
      const page = await getJson(url);
      rows.push(...page.items);
      url = page.links.next;
    }
    await markOlder(rows);
  } catch (err) {
    $("#upcoming-status").textContent = `Could not load encounters: ${err.message}`;
    return;
  }
  upcoming.rows = rows;
  renderUpcoming();
}

/** Options as canonical text: keys sorted at every level, so equal options give equal text. */
function canonicalText(v) {
  if (Array.isArray(v)) return `[${v.map(canonicalText).join(",")}]`;
  if (isObject(v)) return `{${Object.keys(v).sort().map((k) => `${JSON.stringify(k)}:${canonicalText(v[k])}`).join(",")}}`;
  return JSON.stringify(v);
}

async function loadMeta(ids) {
  const todo = ids.filter((id) => !forecastMeta.has(id));
  async function worker() {
    while (todo.length) {
      const id = todo.pop();
      const job = await getJson(`/v1/forecasts/${id}`);
      forecastMeta.set(id, {
        options: job.options || {},
        finished: (job.timings && (job.timings.finished_utc || job.timings.created_utc)) || "",
      });
    }
  }
  await Promise.all(Array.from({ length: Math.min(META_PARALLEL, todo.length) }, worker));
}

/**
 * Mark each row `older` unless its forecast is the latest (by finish time) of its parent and
 * option set. The option set is the listing's own `options_hash` when the service gives one,
 * else the forecast's options read from the forecast itself.
 */
async function markOlder(rows) {
  const needMeta = [...new Set(rows.filter((r) => !r.options_hash).map((r) => r.forecast_id))];
  await loadMeta(needMeta);
  const idsOfParent = new Map();
  const latest = new Map();
  for (const r of rows) {
    const meta = forecastMeta.get(r.forecast_id) || { options: {}, finished: "" };
    r.optionsKey = r.options_hash || canonicalText(meta.options);
    r.options = meta.options;
    const key = `${r.parent_name}\u0000${r.optionsKey}`;
    const finished = r.finished_utc || meta.finished;
    const best = latest.get(key);
    if (!best || finished > best.finished || (finished === best.finished && r.forecast_id > best.id)) {
      latest.set(key, { id: r.forecast_id, finished });
    }
    if (!idsOfParent.has(r.parent_name)) idsOfParent.set(r.parent_name, new Set());
    idsOfParent.get(r.parent_name).add(r.optionsKey);
  }
  // Per parent, the option names whose values differ between its forecasts: what the rows show.
  const differing = new Map();
  for (const [parent, keys] of idsOfParent) {
    const sets = rows.filter((r) => r.parent_name === parent && keys.has(r.optionsKey)).map((r) => r.options);
    const names = new Set(sets.flatMap((o) => Object.keys(o)));
    differing.set(parent, [...names].filter((k) => new Set(sets.map((o) => canonicalText(o[k]))).size > 1).sort());
  }
  for (const r of rows) {
    r.older = latest.get(`${r.parent_name}\u0000${r.optionsKey}`).id !== r.forecast_id;
    r.manyOptionSets = idsOfParent.get(r.parent_name).size > 1;
    r.differing = differing.get(r.parent_name);
  }
}

/** The options that tell forecasts of one parent apart (`keys`), in a few words. */
function optionsText(o, keys) {
  if (!o) return "";
  const words = {
    particles: (v) => `${v} meteoroids`,
    trails: (v) => (v ? `trails ${v.join(", ")}` : "all trails"),
    max_trail_age_years: (v) => `trails ≤ ${v} yr`,
  };
  const first = ["particles", "trails", "max_trail_age_years", "seed"];
  const rank = (k) => (first.includes(k) ? first.indexOf(k) : first.length);
  return keys
    .filter((k) => !(k === "max_trail_age_years" && o.trails)) // named trails: the age limit is moot
    .sort((a, b) => rank(a) - rank(b) || (a < b ? -1 : 1))
    .map((k) => (words[k] ? words[k](o[k]) : `${k.replace(/_/g, " ")} ${isObject(o[k]) || Array.isArray(o[k]) ? canonicalText(o[k]) : o[k] ?? "default"}`))
    .join(" · ");
}

const SORT_KEYS = {
  peak: (r) => r.encounter.peak_utc,
  lambda: (r) => r.encounter.solar_longitude_deg,
  parent: (r) => r.parent_name.toLowerCase(),
  trail: (r) => r.encounter.trail.perihelion_year,
  miss: (r) => Math.abs(r.encounter.miss_distance_au),
  zhr: (r) => (r.encounter.zhr && typeof r.encounter.zhr.estimate === "number" ? r.encounter.zhr.estimate : -1),
  ra: (r) => r.encounter.radiant.ra_deg,
};

function renderUpcoming() {
  const key = SORT_KEYS[upcoming.key];
  const showOlder = $("#upcoming-older").checked;
  const shown = upcoming.rows.filter((r) => showOlder || !r.older);
  const hidden = upcoming.rows.length - shown.length;
  const { from, to } = upcomingRange();
  const weak = shown.filter((r) => classification(r.encounter, "encounters").label !== "encounter").length;
  const n = shown.length - weak;
  $("#upcoming-status").textContent = upcoming.rows.length
    ? `${n} predicted encounter${n === 1 ? "" : "s"} from ${from} to ${to}` +
      (weak ? ` and ${weak} stored crossing${weak === 1 ? "" : "s"} that today's rule calls negligible or near miss (marked)` : "") +
      (hidden ? `; ${hidden} more from older forecasts (tick “Include older forecasts” to list them).` : ".")
    : `No predicted encounters stored from ${from} to ${to}. Submit a forecast to add some.`;
  const rows = shown.sort((a, b) => {
    const x = key(a);
    const y = key(b);
    return (x < y ? -1 : x > y ? 1 : 0) * upcoming.dir;
  });
  for (const th of $("#upcoming-table thead").querySelectorAll("th")) {
    const b = th.querySelector("button");
    if (b && b.dataset.key === upcoming.key) th.setAttribute("aria-sort", upcoming.dir > 0 ? "ascending" : "descending");
    else th.removeAttribute("aria-sort");
  }
  const tbody = $("#upcoming-table tbody");
  tbody.replaceChildren(
    ...rows.map((r) => {
      const e = r.encounter;
      const c = classification(e, "encounters");
      return el(
        "tr",
        {},
        el("td", {}, utcText(e.peak_utc)),
        el("td", { class: "num" }, fmt(e.solar_longitude_deg, 4)),
        el("td", {}, r.parent_name),
        el("td", {}, `${e.trail.perihelion_year} (${e.trail.revolutions} rev)`),
        el("td", { class: "num" }, `${e.miss_distance_au >= 0 ? "+" : ""}${fmt(e.miss_distance_au, 5)}`),
        el(
          "td",
          { class: "num" },
          zhrText(e.zhr),
          c.label !== "encounter" ? el("span", { class: "badge label", title: c.reason }, c.label) : "",
        ),
        el("td", { class: "num" }, `${fmt(e.radiant.ra_deg, 1)}, ${e.radiant.dec_deg >= 0 ? "+" : ""}${fmt(e.radiant.dec_deg, 1)}`),
        el(
          "td",
          {},
          el(
            "span",
            {},
            el("a", { href: `#/forecasts/${r.forecast_id}` }, "view"),
            " ",
            el("a", { href: r.links.forecast }, "JSON"),
            r.older ? el("span", { class: "badge" }, "older") : "",
            r.manyOptionSets ? el("span", { class: "opts" }, optionsText(r.options, r.differing)) : "",
          ),
        ),
      );
    }),
  );
  labelCells($("#upcoming-table"));
}

// ---------------------------------------------------------------------------------------------
// One forecast: progress, then charts and numbers

const current = { id: null, job: null, year: null };

async function openForecast(id) {
  current.id = id;
  current.job = null;
  $("#fc-parent").textContent = "";
  $("#fc-meta").textContent = "";
  $("#fc-done").hidden = true;
  $("#fc-error").hidden = true;
  $("#fc-progress-box").hidden = false;
  $("#fc-progress").value = 0;
  $("#fc-state").textContent = "Loading…";
  await pollForecast(id);
}

async function pollForecast(id) {
  if (current.id !== id) return;
  let job;
  try {
    job = await getJson(`/v1/forecasts/${id}`);
  } catch (err) {
    $("#fc-state").textContent = "";
    showForecastError(`Could not load forecast ${id}: ${err.message}`);
    return;
  }
  if (current.id !== id) return;
  current.job = job;
  $("#fc-parent").textContent = job.parent_name;
  $("#fc-meta").textContent =
    `Years ${job.years[0]}–${job.years[job.years.length - 1]}; ${job.options.particles} meteoroids per trail and passage; ` +
    `trails ${job.options.trails ? job.options.trails.join(", ") : "all within " + job.options.max_trail_age_years + " years"}; ` +
    `seed ${job.options.seed}; model ${job.model_version}.`;
  const pct = Math.round(job.progress.fraction * 100);
  $("#fc-progress").value = job.progress.fraction;
  $("#fc-progress").dataset.state = job.state;
  const stage = job.progress.stage === job.state ? "" : `: ${job.progress.stage}`;
  $("#fc-state").textContent = `${job.state}${stage} (${pct} %)`;
  if (job.state === "done") {
    showForecast(job);
  } else if (job.state === "failed" || job.state === "cancelled") {
    showForecastError(job.error ? `${job.error.title}: ${job.error.detail}` : `The job was ${job.state}.`);
  } else {
    pollTimer = setTimeout(() => pollForecast(id), POLL_MS);
  }
}

function showForecastError(text) {
  const box = $("#fc-error");
  box.textContent = text;
  box.hidden = false;
}

async function showForecast(job) {
  const index = await getJson(`/v1/forecasts/${job.id}/plots`).catch((err) => {
    showForecastError(`Could not list the charts: ${err.message}`);
    return null;
  });
  if (!index) return;
  $("#fc-csv").href = job.links.encounters_csv;
  $("#fc-ics").href = job.links.encounters_ics;
  $("#fc-json").href = job.links.self;
  $("#fc-profiles").href = index.profiles_csv || `/v1/forecasts/${job.id}/profiles.csv`;
  const select = $("#fc-year");
  select.replaceChildren(...index.years.map((y) => el("option", { value: y }, y)));
  select.value = String(index.default_year ?? index.years[0]);
  const cautions = $("#fc-cautions ul");
  cautions.replaceChildren(...(job.result.cautions || job.cautions).map((c) => el("li", {}, c)));
  $("#fc-done").hidden = false;
  await showYear(Number(select.value));
}

async function showYear(year) {
  const job = current.job;
  current.year = year;
  renderNumbers(job, year);
  await Promise.all(
    [...document.querySelectorAll("figure.chart")].map((fig) => loadChart(fig, job.id, year)),
  );
}

/** Boxes narrower than this (px) get the phone layout of the charts (service/plots.py SIZES). */
const NARROW_CHART_PX = 600;

function chartSize(fig) {
  const width = fig.querySelector(".svg-holder").clientWidth || fig.clientWidth;
  return width < NARROW_CHART_PX ? "narrow" : "wide";
}

async function loadChart(fig, id, year) {
  const chart = fig.dataset.chart;
  const base = `/v1/forecasts/${id}/plots/${chart}`;
  const size = chartSize(fig);
  fig.dataset.size = size;
  for (const a of fig.querySelectorAll(".downloads a")) {
    a.href = `${base}.${a.dataset.fmt}?year=${year}&download=true`;
    a.setAttribute("download", `trailcast-${id}-${chart}-${year}.${a.dataset.fmt}`);
  }
  const holder = fig.querySelector(".svg-holder");
  holder.setAttribute("aria-busy", "true");
  try {
    const r = await fetch(`${base}.svg?year=${year}&size=${size}`);
    if (!r.ok) throw new Error(`${r.status}`);
    const doc = new DOMParser().parseFromString(await r.text(), "image/svg+xml");
    const svg = document.importNode(doc.documentElement, true);
    svg.setAttribute("role", "img");
    svg.setAttribute("aria-label", fig.querySelector("figcaption").textContent.trim());
    svg.classList.add(size);
    addPointTitles(svg, chart, current.job, year);
    if (current.id === id && current.year === year) holder.replaceChildren(svg);
  } catch (err) {
    holder.replaceChildren(el("p", { class: "error" }, `Chart not available (${err.message}).`));
  } finally {
    holder.removeAttribute("aria-busy");
    fig.dataset.loadedYear = String(year);
  }
}

function svgTitle(node, text) {
  const t = document.createElementNS(node.namespaceURI, "title"); // the SVG namespace
  t.textContent = text;
  node.prepend(t);
}

const signed = (x, d) => `${x >= 0 ? "+" : ""}${fmt(x, d)}`;

/**
 * Hover details: a <title> on every plotted meteoroid (its time, solar longitude and miss
 * distance, or its radiant) and on each trail's median radiant, from the stored result. The
 * chart draws one <use> per meteoroid in the stored order; a group whose count differs is
 * left without titles rather than labelled wrongly.
 */
function addPointTitles(svg, chart, job, year) {
  if (!job || !job.result) return;
  const res = job.result;
  // The crossings in the order the chart draws them: encounters, then near misses, by index.
  const byItem = new Map((res.particle_crossings || []).map((c) => [`${c.kind}:${c.index}`, c]));
  const crossings = [];
  for (const [kind, key] of [["encounter", "encounters"], ["near_miss", "near_misses"]]) {
    res[key].forEach((e, k) => {
      const c = byItem.get(`${kind}:${k}`);
      if (e.year === year && c && c.t_earth_utc.length) crossings.push(c);
    });
  }
  if (chart === "crossings" || chart === "radiants") {
    const prefix = chart === "crossings" ? "trail-" : "radiants-";
    const groups = [...svg.querySelectorAll(`g[id^="${prefix}"]`)];
    groups.forEach((g, k) => {
      const c = crossings[k];
      const uses = g.querySelectorAll("use");
      if (!c || uses.length !== c.t_earth_utc.length || g.id !== `${prefix}${c.perihelion_year}`) return;
      uses.forEach((u, j) => {
        const head = `${c.perihelion_year} trail, meteoroid ${j + 1}: `;
        svgTitle(u, chart === "crossings"
          ? `${head}${utcText(c.t_earth_utc[j])} UTC, λ☉ ${fmt(c.solar_longitude_deg[j], 4)}°, miss ${signed(c.miss_distance_au[j], 5)} au`
          : `${head}radiant α ${fmt(c.ra_deg[j], 2)}°, δ ${signed(c.dec_deg[j], 2)}°`);
      });
    });
  }
  if (chart === "radiants" || chart === "profile") {
    for (const key of ["encounters", "near_misses"]) {
      for (const e of res[key]) {
        if (e.year !== year) continue;
        const ty = e.trail.perihelion_year;
        const kind = classification(e, key).label;
        const text = `${ty} trail (${kind}): peak ${utcText(e.peak_utc)} UTC, ZHR ${zhrText(e.zhr)}, ` +
          `radiant α ${fmt(e.radiant.ra_deg, 1)}°, δ ${signed(e.radiant.dec_deg, 1)}°`;
        const g = svg.querySelector(chart === "radiants" ? `#radiant-${ty}` : `#profile-${ty}`);
        if (g && !g.querySelector(":scope > title")) svgTitle(g, text);
      }
    }
  }
}

/** Redraw charts whose box crossed NARROW_CHART_PX since they were drawn (phone turned, window resized). */
let resizeTimer = null;
function onResize() {
  clearTimeout(resizeTimer);
  resizeTimer = setTimeout(() => {
    if ($("#fc-done").hidden || !current.job) return;
    for (const fig of document.querySelectorAll("figure.chart")) {
      if (fig.dataset.size && fig.dataset.size !== chartSize(fig)) loadChart(fig, current.id, current.year);
    }
  }, 200);
}

/**
 * What a crossing is called by its predicted activity (encounter, negligible, near miss) and
 * why, from its `classification`; a crossing without one keeps the list it is in.
 */
function classification(e, key) {
  const c = e.classification;
  if (c && c.label) return c;
  return { label: key === "encounters" ? "encounter" : "near miss", zhr_level: null, reason: "" };
}

function renderNumbers(job, year) {
  const rows = [];
  let level = null;
  for (const key of ["encounters", "near_misses"]) {
    for (const e of job.result[key]) {
      if (e.year !== year) continue;
      const c = classification(e, key);
      if (c.zhr_level != null) level = c.zhr_level;
      rows.push(
        el(
          "tr",
          { class: c.label.replace(" ", "_") },
          el("td", { title: c.reason }, c.label),
          el("td", {}, `${e.trail.perihelion_year} (${e.trail.revolutions} rev)`),
          el("td", {}, utcText(e.peak_utc)),
          el("td", { class: "num" }, fmt(e.solar_longitude_deg, 4)),
          el("td", { class: "num" }, `${e.miss_distance_au >= 0 ? "+" : ""}${fmt(e.miss_distance_au, 5)} ± ${fmt(e.miss_distance_spread_au, 5)}`),
          el("td", { class: "num" }, fmt(e.fwhm_hours, 2)),
          el("td", { class: "num" }, `${fmt(e.radiant.ra_deg, 1)}, ${e.radiant.dec_deg >= 0 ? "+" : ""}${fmt(e.radiant.dec_deg, 1)}`),
          el("td", { class: "num" }, fmt(e.vg_km_s, 1)),
          el("td", { class: "num" }, e.particles),
          el("td", { class: "num" }, zhrText(e.zhr)),
          el("td", {}, windowText(e.window, e.peak_utc)),
        ),
      );
    }
  }
  if (!rows.length) {
    rows.push(el("tr", {}, el("td", { colspan: 11 }, `No trail passes near Earth's path in ${year}: no outburst expected from the simulated trails.`)));
  }
  $("#fc-rule").textContent = level == null ? "" :
    ` Kind by predicted activity: encounter = peak ZHR ${fmt(level, 0)} or more; negligible = passes close to Earth's path but below that; near miss = farther and below. Hover a kind for the reason.`;
  $("#fc-table tbody").replaceChildren(...rows);
  labelCells($("#fc-table"));
}

// ---------------------------------------------------------------------------------------------
// Submit

function mode() {
  return $("#submit-form").elements.mode.value;
}

function setMode(m) {
  $("#submit-form").elements.mode.value = m;
  $("#mode-fields").hidden = m !== "fields";
  $("#mode-json").hidden = m !== "json";
  $("#mode-file").hidden = m !== "file";
}

/** A form field as the API would receive it: number when it reads as one, text otherwise. */
function fieldValue(text, numeric) {
  const t = text.trim();
  if (t === "") return null;
  if (numeric && t !== "" && Number.isFinite(Number(t))) return Number(t);
  return t;
}

function orbitFromForm() {
  const f = $("#submit-form").elements;
  if (mode() === "fields") {
    const orbit = {};
    for (const k of ["name", "epoch", "q", "e", "i", "node", "peri", "tp"]) {
      // Every field but the name is a number when it reads as one (epoch and tp: JD TDB).
      const v = fieldValue(f[k].value, k !== "name");
      if (v !== null) orbit[k] = v;
    }
    return orbit;
  }
  const text = $("#orbit-json").value;
  try {
    return JSON.parse(text);
  } catch (err) {
    throw new Invalid("orbit", `not valid JSON (${err.message})`);
  }
}

function bodyFromForm() {
  const f = $("#submit-form").elements;
  const orbit = orbitFromForm();
  const first = fieldValue(f.first_year.value, true);
  const last = fieldValue(f.last_year.value, true);
  const body = { orbit, years: last === null ? [first] : [first, last] };
  const particles = fieldValue(f.particles.value, true);
  if (particles !== null) body.particles = particles;
  const options = {};
  const trails = f.trails.value.split(/[\s,;]+/).filter((t) => t !== "");
  if (trails.length) options.trails = trails.map((t) => fieldValue(t, true));
  const age = fieldValue(f.max_age.value, true);
  if (age !== null) options.max_trail_age_years = age;
  if (Object.keys(options).length) body.options = options;
  return body;
}

const FIELD_INPUTS = {
  "orbit.name": "name", "orbit.epoch": "epoch", "orbit.q": "q", "orbit.e": "e", "orbit.i": "i",
  "orbit.node": "node", "orbit.peri": "peri", "orbit.tp": "tp", "years.0": "first_year",
  "years.1": "last_year", years: "last_year", particles: "particles",
  "options.max_trail_age_years": "max_age",
};

function showSubmitError(message, field) {
  const form = $("#submit-form");
  for (const input of form.querySelectorAll("[aria-invalid]")) input.removeAttribute("aria-invalid");
  const box = $("#submit-error");
  box.hidden = !message;
  box.textContent = message || "";
  if (!message) return;
  let input = null;
  if (field && field.startsWith("options.trails")) input = form.elements.trails;
  else if (field && FIELD_INPUTS[field] && (mode() === "fields" || !field.startsWith("orbit."))) input = form.elements[FIELD_INPUTS[field]];
  else if (field && field.startsWith("orbit") && mode() !== "fields") input = $("#orbit-json");
  if (input) {
    input.setAttribute("aria-invalid", "true");
    input.setAttribute("aria-describedby", "submit-error");
  }
}

async function submitForecast(event) {
  event.preventDefault();
  let body;
  try {
    body = bodyFromForm();
    validateBody(body);
  } catch (err) {
    if (err instanceof Invalid) {
      showSubmitError(err.message, err.field);
      return;
    }
    throw err;
  }
  showSubmitError("");
  const button = $("#submit-button");
  button.disabled = true;
  try {
    const r = await fetch("/v1/forecasts", {
      method: "POST",
      headers: { "Content-Type": "application/json", Accept: "application/json" },
      body: JSON.stringify(body),
    });
    const answer = await r.json().catch(() => ({}));
    if (!r.ok) {
      showSubmitError(answer.detail || `${r.status} ${r.statusText}`, answer.field);
      return;
    }
    location.hash = `#/forecasts/${answer.id}`;
  } catch (err) {
    showSubmitError(`The service could not be reached: ${err.message}`);
  } finally {
    button.disabled = false;
  }
}

function fillDemo() {
  const f = $("#submit-form").elements;
  for (const [k, v] of Object.entries(DEMO_ORBIT)) f[k].value = v;
  $("#orbit-json").value = JSON.stringify(DEMO_ORBIT, null, 2);
}

function readFile() {
  const file = $("#orbit-file").files[0];
  if (!file) return;
  const reader = new FileReader();
  reader.onload = () => {
    $("#orbit-json").value = String(reader.result);
    setMode("json");
  };
  reader.readAsText(file);
}

// ---------------------------------------------------------------------------------------------

document.addEventListener("DOMContentLoaded", () => {
  $("#upcoming-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    loadUpcoming();
  });
  for (const b of document.querySelectorAll("#upcoming-table thead button")) {
    b.addEventListener("click", () => {
      upcoming.dir = upcoming.key === b.dataset.key ? -upcoming.dir : 1;
      upcoming.key = b.dataset.key;
      renderUpcoming();
    });
  }
  $("#upcoming-older").addEventListener("change", renderUpcoming);
  window.addEventListener("resize", onResize);
  $("#fc-year").addEventListener("change", (ev) => showYear(Number(ev.target.value)));
  $("#submit-form").addEventListener("submit", submitForecast);
  for (const r of document.querySelectorAll('input[name="mode"]')) r.addEventListener("change", () => setMode(mode()));
  $("#fill-demo").addEventListener("click", fillDemo);
  $("#orbit-file").addEventListener("change", readFile);
  window.addEventListener("hashchange", route);
  route();
});
