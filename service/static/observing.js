// trailcast dashboard, observing panel: where and when each predicted peak can be seen.
// Plain JavaScript, no library, self-contained (it shares nothing with dashboard.js but the
// page): it watches the forecast view (#fc-done) and, for a done forecast, draws the world map of
// each encounter with its best-placed regions, and a site's chart and numbers from the form.
// Every request goes to this service: /v1/forecasts/{id}/map/{k}[.svg], /visibility[.svg].
"use strict";

(() => {
  const $o = (sel, root = document) => root.querySelector(sel);
  const state = { id: null, encounters: [], k: 0, site: null };

  function node(tag, attrs = {}, ...children) {
    const n = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs)) {
      if (v === undefined || v === null) continue;
      if (k === "class") n.className = v;
      else n.setAttribute(k, v);
    }
    for (const c of children) n.append(c instanceof Node ? c : document.createTextNode(String(c)));
    return n;
  }

  async function json(url) {
    const r = await fetch(url, { headers: { Accept: "application/json" } });
    const body = await r.json().catch(() => null);
    if (!r.ok) throw new Error(body && body.detail ? body.detail : `${r.status} ${r.statusText}`);
    return body;
  }

  async function inlineSvg(holder, url, label) {
    holder.setAttribute("aria-busy", "true");
    try {
      const r = await fetch(url);
      if (!r.ok) {
        const body = await r.json().catch(() => null);
        throw new Error(body && body.detail ? body.detail : `${r.status}`);
      }
      const doc = new DOMParser().parseFromString(await r.text(), "image/svg+xml");
      const svg = document.importNode(doc.documentElement, true);
      svg.setAttribute("role", "img");
      svg.setAttribute("aria-label", label);
      holder.replaceChildren(svg);
    } catch (err) {
      holder.replaceChildren(node("p", { class: "error" }, `Chart not available (${err.message}).`));
    } finally {
      holder.removeAttribute("aria-busy");
    }
  }

  function downloads(base, query) {
    const sep = query ? `${query}&` : "";
    return node(
      "p",
      { class: "downloads" },
      "Download: ",
      node("a", { href: `${base}.svg?${sep}download=true`, download: "" }, "SVG"),
      " ",
      node("a", { href: `${base}.png?${sep}download=true`, download: "" }, "PNG"),
    );
  }

  // ------------------------------------------------------------------------------------------
  // The panel (built once into the page's #observing-panel hook)

  function build(panel) {
    panel.replaceChildren(
      node("h3", { id: "obs-title" }, "Where and when to watch"),
      node(
        "p",
        { class: "obs-note" },
        "Expected hourly rate HR = ZHR × sin(radiant altitude) / r^(6.5 − lm) (Koschack & Rendtel 1990); " +
          "“observable” means the radiant at least 20° high with the Sun at least 12° below the horizon. " +
          "The Moon is shown, not folded into the rate: set the limiting magnitude to what you expect to see.",
      ),
      node(
        "div",
        { class: "inline-form" },
        node("label", { for: "obs-encounter" }, "Encounter"),
        node("select", { id: "obs-encounter" }),
      ),
      node("p", { id: "obs-empty", hidden: "" }, "This forecast has no encounters: nothing to observe."),
      node(
        "figure",
        { class: "obs-figure", id: "obs-map" },
        node(
          "figcaption",
          {},
          node("strong", {}, "World map. "),
          "Where the peak is observable, coloured by the expected hourly rate at sea level; the solid line is where the Sun is on the horizon, the dashed one where it is 12° down; the star marks the radiant at the zenith.",
        ),
        node("div", { class: "obs-svg", "aria-live": "polite" }),
        node("p", { class: "obs-dl" }),
      ),
      node("h4", {}, "Best-placed regions"),
      node("ul", { id: "obs-regions" }),
      node(
        "form",
        { id: "obs-site-form", class: "obs-form", novalidate: "" },
        node("h4", {}, "Your site"),
        field("obs-lat", "Latitude (°, north +)", "-90", "90", "any", "e.g. 50.1"),
        field("obs-lon", "Longitude (°, east +)", "-180", "360", "any", "e.g. 8.7"),
        field("obs-elev", "Elevation (m)", "-500", "9000", "any", "0", "0"),
        field("obs-lm", "Limiting magnitude", "1", "8", "0.1", "6.5", "6.5"),
        node("p", {}, node("button", { type: "submit", id: "obs-site-button" }, "Show this site")),
        node("p", { id: "obs-site-error", class: "error", role: "alert", hidden: "" }),
      ),
      node(
        "div",
        { id: "obs-site", hidden: "" },
        node("p", { id: "obs-verdict", class: "obs-verdict", role: "status" }),
        node("div", { class: "table-wrap" }, node("table", { id: "obs-peak" })),
        node(
          "figure",
          { class: "obs-figure", id: "obs-chart" },
          node(
            "figcaption",
            {},
            node("strong", {}, "Your night. "),
            "Expected meteors per hour against local (mean solar) time, with day, twilight and night shaded, the Moon's time above the horizon hatched along the top, and the radiant's and Moon's altitude (right axis).",
          ),
          node("div", { class: "obs-svg", "aria-live": "polite" }),
          node("p", { class: "obs-dl" }),
        ),
        node("p", { class: "links" }, node("a", { id: "obs-ics", href: "#" }, "Calendar for this site (iCalendar)")),
        node("h4", {}, "Rise, set and twilight (UTC and local)"),
        node("ul", { id: "obs-events", class: "obs-events" }),
      ),
      node(
        "aside",
        { class: "cautions", id: "obs-cautions", role: "note", "aria-label": "Observing cautions" },
        node("strong", {}, "Before you go out."),
        node("ul", {}),
      ),
    );
    $o("#obs-encounter").addEventListener("change", (ev) => {
      state.k = Number(ev.target.value);
      showEncounter();
    });
    $o("#obs-site-form").addEventListener("submit", submitSite);
  }

  function field(id, label, min, max, step, placeholder, value) {
    return node(
      "p",
      { class: "obs-field" },
      node("label", { for: id }, label),
      node("input", { id, type: "number", inputmode: "decimal", min, max, step, placeholder, value }),
    );
  }

  // ------------------------------------------------------------------------------------------
  // A done forecast: encounters, map, regions

  async function open(id) {
    state.id = id;
    state.encounters = [];
    let job;
    try {
      job = await json(`/v1/forecasts/${id}`);
    } catch (err) {
      return;
    }
    if (state.id !== id || job.state !== "done" || !job.result) return;
    state.encounters = job.result.encounters || [];
    const select = $o("#obs-encounter");
    select.replaceChildren(
      ...state.encounters.map((e, k) =>
        node("option", { value: k }, `${e.trail.perihelion_year} trail, peak ${e.peak_utc.replace("T", " ").replace("Z", " UTC")}`),
      ),
    );
    $o("#obs-empty").hidden = state.encounters.length > 0;
    for (const sel of ["#obs-map", "#obs-regions", "#obs-site-form", "#obs-encounter"]) {
      $o(sel).closest(".inline-form, figure, ul, form").hidden = state.encounters.length === 0;
    }
    state.k = 0;
    select.value = "0";
    if (state.encounters.length) await showEncounter();
  }

  async function showEncounter() {
    const id = state.id;
    const k = state.k;
    const base = `/v1/forecasts/${id}/map/${k}`;
    const fig = $o("#obs-map");
    fig.querySelector(".obs-dl").replaceWith(Object.assign(downloads(base, ""), { className: "obs-dl downloads" }));
    const tasks = [inlineSvg(fig.querySelector(".obs-svg"), `${base}.svg`, "World map of where the peak is observable")];
    tasks.push(
      json(base)
        .then((m) => {
          if (state.id !== id || state.k !== k) return;
          $o("#obs-regions").replaceChildren(
            ...(m.regions.length
              ? m.regions.map((r) => node("li", {}, r.text))
              : [node("li", {}, "Nowhere on Earth is the radiant high in a dark sky at the peak.")]),
            node("li", { class: "obs-note" }, `Observable from ${(100 * m.observable_fraction_of_earth).toFixed(0)} % of Earth's surface; Moon ${(100 * m.moon.illuminated_fraction).toFixed(0)} % lit, ${m.moon.radiant_separation_deg.toFixed(0)}° from the radiant.`),
          );
          $o("#obs-cautions ul").replaceChildren(...m.cautions.map((c) => node("li", {}, c)));
        })
        .catch((err) => $o("#obs-regions").replaceChildren(node("li", { class: "error" }, err.message))),
    );
    if (state.site) tasks.push(showSite());
    await Promise.all(tasks);
  }

  // ------------------------------------------------------------------------------------------
  // A site

  function readSite() {
    const num = (id) => $o(id).value.trim();
    const values = { lat: num("#obs-lat"), lon: num("#obs-lon"), elevation_m: num("#obs-elev") || "0", limiting_magnitude: num("#obs-lm") || "6.5" };
    const limits = { lat: [-90, 90], lon: [-180, 360], elevation_m: [-500, 9000], limiting_magnitude: [1, 8] };
    for (const [k, [lo, hi]] of Object.entries(limits)) {
      const v = Number(values[k]);
      if (values[k] === "" || !Number.isFinite(v)) return { error: `${k}: Input should be a valid number` };
      if (v < lo) return { error: `${k}: Input should be greater than or equal to ${lo}` };
      if (v > hi) return { error: `${k}: Input should be less than or equal to ${hi}` };
    }
    return { site: values };
  }

  async function submitSite(ev) {
    ev.preventDefault();
    const box = $o("#obs-site-error");
    const { site, error } = readSite();
    if (error) {
      box.textContent = error;
      box.hidden = false;
      return;
    }
    box.hidden = true;
    state.site = site;
    await showSite();
  }

  async function showSite() {
    const id = state.id;
    const k = state.k;
    const q = new URLSearchParams(state.site).toString();
    let v;
    try {
      v = await json(`/v1/forecasts/${id}/visibility?${q}&timeline=false`);
    } catch (err) {
      const box = $o("#obs-site-error");
      box.textContent = err.message;
      box.hidden = false;
      return;
    }
    if (state.id !== id || state.k !== k) return;
    const e = v.encounters[k];
    const p = e.at_peak;
    $o("#obs-site").hidden = false;
    $o("#obs-verdict").textContent = `At ${v.site.lat_deg}°, ${v.site.lon_deg}°: ${e.verdict}.`;
    const row = (h, d) => node("tr", {}, node("th", { scope: "row" }, h), node("td", {}, d));
    $o("#obs-peak").replaceChildren(
      node("caption", {}, `At the peak, ${e.peak_utc} (local ${p.local_time}, ${e.local_time.kind})`),
      node(
        "tbody",
        {},
        row("Radiant", `altitude ${p.radiant_alt_deg.toFixed(1)}°, azimuth ${p.radiant_az_deg.toFixed(1)}°`),
        row("Sun", `${p.sun_alt_deg.toFixed(1)}° (${p.sky})`),
        row("Moon", `altitude ${p.moon_alt_deg.toFixed(1)}°, ${(100 * p.moon_illuminated_fraction).toFixed(0)} % lit, ${p.moon_radiant_separation_deg.toFixed(0)}° from the radiant`),
        row("Expected hourly rate", p.hourly_rate === null ? "–" : `${p.hourly_rate} (${p.hourly_rate_low}–${p.hourly_rate_high}) at lm ${v.thresholds.limiting_magnitude}`),
      ),
    );
    $o("#obs-events").replaceChildren(
      ...e.events.map((x) => node("li", {}, `${x.time_utc.replace("T", " ").replace("Z", " UTC")} (local ${x.local_time}): ${x.event}`)),
    );
    $o("#obs-ics").href = `/v1/forecasts/${id}/encounters.ics?lat=${encodeURIComponent(state.site.lat)}&lon=${encodeURIComponent(state.site.lon)}`;
    const base = `/v1/forecasts/${id}/visibility`;
    const chartQuery = `${q}&encounter=${k}`;
    const fig = $o("#obs-chart");
    fig.querySelector(".obs-dl").replaceWith(Object.assign(downloads(base, chartQuery), { className: "obs-dl downloads" }));
    await inlineSvg(fig.querySelector(".obs-svg"), `${base}.svg?${chartQuery}`, "Expected hourly rate at your site against local time");
  }

  // ------------------------------------------------------------------------------------------
  // Follow the page: open when the forecast view shows a done forecast

  function forecastId() {
    const m = (location.hash || "").match(/^#\/forecasts\/([0-9a-f]{32})$/);
    return m ? m[1] : null;
  }

  document.addEventListener("DOMContentLoaded", () => {
    const panel = $o("#observing-panel");
    const done = $o("#fc-done");
    if (!panel || !done) return;
    build(panel);
    const check = () => {
      const id = forecastId();
      if (!done.hidden && id && id !== state.id) open(id);
      if (!id) state.id = null;
    };
    new MutationObserver(check).observe(done, { attributes: true, attributeFilter: ["hidden"] });
    window.addEventListener("hashchange", () => {
      state.id = null;
      check();
    });
    check();
  });
})();
