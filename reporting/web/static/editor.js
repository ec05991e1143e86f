/* segreport score editor: the bull's-eye maps, the study form, live analysis and the impression.
 *
 * Shared by the folder page (entry.js) and the lab page (lab.js). Each page builds one editor with
 * SegreportEditor.create(options) and keeps its own way of opening and saving studies:
 *   options.fetch(url, init)  how the editor calls the server (the lab page adds its CSRF header
 *                             and handles an ended session); default window.fetch
 *   options.onChange()        after every edit (the folder page autosaves its draft)
 *   options.onResult(result)  after every live analysis shown (the lab page shows the comparison)
 *   options.loadPhrases       false: the page calls loadPhrases() itself (after signing in)
 * Every computed value comes from the server (/api/analyze runs the same code as
 * `segreport analyze`); this script only collects the form, draws the maps and shows answers.
 * User text is only ever set with textContent or attribute values, never parsed as markup.
 */
(function () {
  "use strict";

  const SVG = "http://www.w3.org/2000/svg";
  const STAGES = ["rest", "low_dose", "peak", "recovery"];
  const KINDS = ["wall_motion", "perfusion"];
  const ANALYZE_DELAY_MS = 250;
  const IMPRESSION_BOXES = ["impression", "recommendations"];
  const IMPRESSION_WORDS = {
    none: "No impression written yet: the report prints the computed findings. Accept the draft, edit it or write your own.",
    unconfirmed: "Written, not yet confirmed against the findings: it is confirmed when you save.",
    current: "Confirmed against the current findings.",
    stale: "Written against earlier findings: the scores changed since it was confirmed. Review the impression and confirm it again.",
    edited: "Edited: confirmed against the current findings when you save.",
  };

  // --- small helpers (no editor state) ---------------------------------------------------------

  function readJson(id) {
    const el = document.getElementById(id);
    return el ? JSON.parse(el.textContent || "null") : null;
  }
  function $(selector, root) { return (root || document).querySelector(selector); }
  function $all(selector, root) { return Array.from((root || document).querySelectorAll(selector)); }
  function svgEl(name, attrs) {
    const el = document.createElementNS(SVG, name);
    for (const [k, v] of Object.entries(attrs || {})) el.setAttribute(k, String(v));
    return el;
  }
  function clone(value) { return value === undefined ? undefined : JSON.parse(JSON.stringify(value)); }
  function isObject(value) { return value !== null && typeof value === "object" && !Array.isArray(value); }
  function getPath(obj, path) {
    let cur = obj;
    for (const key of path.split(".")) {
      if (!isObject(cur) || !(key in cur)) return undefined;
      cur = cur[key];
    }
    return cur;
  }
  function setPath(obj, path, value) {
    const keys = path.split(".");
    let cur = obj;
    keys.slice(0, -1).forEach((key) => {
      if (!isObject(cur[key])) cur[key] = {};
      cur = cur[key];
    });
    cur[keys[keys.length - 1]] = value;
  }
  function deletePath(obj, path) {
    const keys = path.split(".");
    const parent = keys.length > 1 ? getPath(obj, keys.slice(0, -1).join(".")) : obj;
    if (isObject(parent)) delete parent[keys[keys.length - 1]];
  }
  function prune(obj) {
    for (const [key, value] of Object.entries(obj)) {
      if (isObject(value)) {
        prune(value);
        if (Object.keys(value).length === 0) delete obj[key];
      }
    }
    return obj;
  }
  function clock(date) { return (date || new Date()).toLocaleTimeString([], { hour: "2-digit", minute: "2-digit", second: "2-digit" }); }
  function setStatus(text, kind) {
    const el = $("#status");
    el.textContent = text;
    el.dataset.kind = kind || "info";
  }
  function debounce(fn, ms) {
    let timer = null;
    const run = (...args) => { clearTimeout(timer); timer = setTimeout(() => fn(...args), ms); };
    run.flush = () => { clearTimeout(timer); return fn(); };
    run.cancel = () => clearTimeout(timer);
    return run;
  }

  function create(options) {
    options = options || {};
    const request = options.fetch || ((url, init) => window.fetch(url, init));
    const onChange = options.onChange || (() => {});
    const STAGE_TITLES = { rest: "Rest", low_dose: "Low dose", peak: "Peak", recovery: "Recovery" }; // set by the protocol
    const geometry = readJson("geometry");
    const palette = geometry.palette;
    const FORM = readJson("form");
    const state = {
      model: "17",
      scores: { wall_motion: {}, perfusion: {} },
      quickProblems: {},
      active: "rest",
      extras: {},
      dirty: false,
      readOnly: false,
      boundaries: null,
      analysisSeq: 0,
      keptNotes: [],
      impressionEdited: false,
      impressionStatus: "none",
      computedImpression: "",
      phrases: [],
      rawPhrases: [],
      lastBox: "impression",
    };
    for (const kind of KINDS) for (const stage of STAGES) state.scores[kind][stage] = [];

    function sectorsOf(model) { return geometry.models[model].sectors; }
    function segmentCount() { return sectorsOf(state.model).length; }
    function maxScore(kind) {
      return kind === "perfusion" ? 3 : Number($("#f-wall_motion_scale").value || "4");
    }

    // --- scores -------------------------------------------------------------------------------

    function scoresFor(kind, stage) {
      const list = state.scores[kind][stage];
      while (list.length < segmentCount()) list.push(null);
      return list;
    }
    function nextScore(kind, value) {
      if (value === null || value === undefined) return 1;
      if (value === "x") return 1;
      return value >= maxScore(kind) ? "x" : value + 1;
    }
    function scoreChar(value) { return value === null || value === undefined ? "-" : String(value); }

    function formatScores(kind, stage) {
      const list = scoresFor(kind, stage);
      if (list.every((v) => v === null)) return "";
      const groups = [];
      let ring = null;
      list.forEach((value, i) => {
        const sector = sectorsOf(state.model)[i];
        const r = sector ? sector.ring : "extra";
        if (r === ring) groups[groups.length - 1] += scoreChar(value);
        else { groups.push(scoreChar(value)); ring = r; }
      });
      return groups.join(" ");
    }

    /** Quick-entry text -> scores; characters that are not scores are reported, not guessed. */
    function parseQuick(text) {
      const scores = [];
      const problems = [];
      let position = 0;
      for (const char of text) {
        if (/\s/.test(char)) continue;
        position += 1;
        if (/^[0-9]$/.test(char)) scores.push(Number(char));
        else if (char === "x" || char === "X") scores.push("x");
        else if (char === "-" || char === "." || char === "_") scores.push(null);
        else {
          scores.push(null);
          problems.push(`character ${position} is '${char}'; use a score digit, x for not visualised or - for not yet scored`);
        }
      }
      return { scores, problems };
    }

    /** A study-file score set (text, number or mapping) -> list by segment. */
    function scoresFromDocument(value) {
      if (value === null || value === undefined) return [];
      if (typeof value === "number") value = String(value);
      if (typeof value === "string") return parseQuick(value).scores;
      if (isObject(value)) {
        const list = [];
        for (const [key, score] of Object.entries(value)) {
          const n = parseInt(key, 10);
          if (!(n >= 1 && n <= 64)) continue;
          while (list.length < n) list.push(null);
          list[n - 1] = score === null || String(score).toLowerCase() === "x" ? "x" : Number(score);
        }
        return list;
      }
      return [];
    }

    function scoresToDocument(list) {
      const out = {};
      list.forEach((value, i) => { if (value !== null && value !== undefined) out[String(i + 1)] = value; });
      return out;
    }

    // --- maps ---------------------------------------------------------------------------------

    function cellLook(kind, value) {
      if (value === "x") return { fill: "url(#hatch)", ink: palette.not_seen.ink, word: "not visualised", mark: "x" };
      if (value === null || value === undefined) return null;
      const entry = palette[kind][String(value)];
      if (!entry || (kind === "wall_motion" && value > maxScore(kind))) {
        return { fill: "#ffffff", ink: "#a3161a", word: "not a valid score", mark: String(value), invalid: true };
      }
      return { fill: entry.fill, ink: entry.ink, word: entry.word, mark: String(value) };
    }

    function buildMap(svg) {
      const kind = svg.dataset.kind;
      const stage = svg.dataset.stage;
      svg.replaceChildren();
      const sectors = svgEl("g", { class: "sectors" });
      const labels = svgEl("g", { class: "labels", "aria-hidden": "true" });
      sectorsOf(state.model).forEach((s, i) => {
        const path = svgEl("path", {
          d: s.d,
          class: "sector",
          "data-segment": s.number,
          "data-name": s.name,
          role: "button",
          tabindex: i === 0 ? 0 : -1,
        });
        path.appendChild(svgEl("title"));
        sectors.appendChild(path);
        const text = svgEl("text", { x: s.label[0], y: s.label[1], class: "mark", "data-mark": s.number });
        labels.appendChild(text);
      });
      svg.appendChild(sectors);
      const boundary = svgEl("path", { class: "boundary", d: currentBoundaries() });
      svg.appendChild(boundary);
      svg.appendChild(svgEl("circle", { class: "rim", r: geometry.radius }));
      svg.appendChild(labels);
      const R = geometry.radius;
      const words = [["anterior", 0, -1.07 * R, 0], ["inferior", 0, 1.09 * R, 0], ["septal", -1.09 * R, 0, -90], ["lateral", 1.09 * R, 0, 90]];
      for (const [word, x, y, angle] of words) {
        const t = svgEl("text", { class: "orientation", x: 0, y: 0, transform: `translate(${x} ${y}) rotate(${angle})`, "aria-hidden": "true" });
        t.textContent = word;
        svg.appendChild(t);
      }
      svg.appendChild(svgEl("path", { class: "focus-outer", d: "" }));
      svg.appendChild(svgEl("path", { class: "focus-inner", d: "" }));
      paintMap(kind, stage);
    }

    function currentBoundaries() {
      if (state.boundaries !== null) return state.boundaries;
      const maps = geometry.models[state.model].boundaries;
      const chosen = ($("#f-territory_map").value || "standard").trim();
      return maps[chosen] || maps.standard || "";
    }

    function mapSvg(kind, stage) { return $(`svg.bullseye[data-kind="${kind}"][data-stage="${stage}"]`); }

    function paintMap(kind, stage) {
      const svg = mapSvg(kind, stage);
      if (!svg) return;
      const list = scoresFor(kind, stage);
      const what = kind === "wall_motion" ? "wall motion" : "perfusion";
      for (const path of $all(".sector", svg)) {
        const n = Number(path.dataset.segment);
        const look = cellLook(kind, list[n - 1]);
        const text = $(`[data-mark="${n}"]`, svg);
        const name = path.dataset.name;
        let said;
        if (look) {
          path.setAttribute("fill", look.fill);
          path.classList.add("scored");
          path.classList.toggle("bad-score", Boolean(look.invalid));
          text.textContent = look.mark;
          text.setAttribute("fill", look.ink);
          text.setAttribute("class", "mark score");
          said = `${look.mark} ${look.word}`;
        } else {
          path.setAttribute("fill", "#ffffff");
          path.classList.remove("scored", "bad-score");
          text.textContent = String(n);
          text.setAttribute("fill", "#6b7785");
          text.setAttribute("class", "mark number");
          said = "not yet scored";
        }
        path.setAttribute("aria-label", `Segment ${n}, ${name}, ${what}: ${said}`);
        path.firstChild.textContent = `${n} ${name}: ${said}`;
      }
    }

    function syncQuick(kind, stage) {
      const input = $(`.quick-input[data-kind="${kind}"][data-stage="${stage}"]`) || $(`input[data-quick="${kind}"][data-stage="${stage}"]`);
      if (input && document.activeElement !== input) input.value = formatScores(kind, stage);
    }

    function setScore(kind, stage, number, value) {
      const list = scoresFor(kind, stage);
      list[number - 1] = value;
      delete state.quickProblems[`${stage}.${kind}`];
      paintMap(kind, stage);
      syncQuick(kind, stage);
      changed();
    }

    function focusSector(svg, number) {
      const count = segmentCount();
      const n = ((number - 1 + count) % count) + 1;
      const target = $(`.sector[data-segment="${n}"]`, svg);
      if (!target) return;
      for (const p of $all(".sector", svg)) p.setAttribute("tabindex", p === target ? "0" : "-1");
      target.focus();
    }

    function showFocus(svg, path) {
      for (const cls of ["focus-outer", "focus-inner"]) $(`.${cls}`, svg).setAttribute("d", path ? path.getAttribute("d") : "");
    }

    function wireMaps() {
      for (const svg of $all("svg.bullseye")) {
        const kind = svg.dataset.kind;
        const stage = svg.dataset.stage;
        svg.addEventListener("click", (event) => {
          const path = event.target.closest(".sector");
          if (!path || state.readOnly) return;
          const n = Number(path.dataset.segment);
          setScore(kind, stage, n, nextScore(kind, scoresFor(kind, stage)[n - 1]));
          focusSector(svg, n);
        });
        svg.addEventListener("focusin", (event) => {
          const path = event.target.closest(".sector");
          if (path) {
            for (const p of $all(".sector", svg)) p.setAttribute("tabindex", p === path ? "0" : "-1");
            showFocus(svg, path);
          }
        });
        svg.addEventListener("focusout", () => showFocus(svg, null));
        svg.addEventListener("keydown", (event) => {
          const path = event.target.closest(".sector");
          if (!path || event.ctrlKey || event.metaKey || event.altKey) return;
          if (state.readOnly && !/^(Arrow|Home$|End$)/.test(event.key)) return;
          const n = Number(path.dataset.segment);
          const key = event.key;
          let handled = true;
          if (/^[1-9]$/.test(key) && Number(key) <= maxScore(kind)) {
            setScore(kind, stage, n, Number(key));
            focusSector(svg, n + 1);
          } else if (key === "x" || key === "X") {
            setScore(kind, stage, n, "x");
            focusSector(svg, n + 1);
          } else if (key === "Delete" || key === "-") {
            setScore(kind, stage, n, null);
          } else if (key === "Backspace") {
            setScore(kind, stage, n, null);
            focusSector(svg, n - 1);
          } else if (key === " " || key === "Enter") {
            setScore(kind, stage, n, nextScore(kind, scoresFor(kind, stage)[n - 1]));
          } else if (key === "ArrowRight" || key === "ArrowDown") {
            focusSector(svg, n + 1);
          } else if (key === "ArrowLeft" || key === "ArrowUp") {
            focusSector(svg, n - 1);
          } else if (key === "Home") {
            focusSector(svg, 1);
          } else if (key === "End") {
            focusSector(svg, segmentCount());
          } else {
            handled = false;
          }
          if (handled) event.preventDefault();
        });
      }
      for (const input of $all("input[data-quick]")) {
        const kind = input.dataset.quick;
        const stage = input.dataset.stage;
        input.addEventListener("input", () => {
          const { scores, problems } = parseQuick(input.value);
          while (scores.length < segmentCount()) scores.push(null);
          state.scores[kind][stage] = scores;
          if (problems.length) state.quickProblems[`${stage}.${kind}`] = problems;
          else delete state.quickProblems[`${stage}.${kind}`];
          paintMap(kind, stage);
          changed();
        });
        input.addEventListener("blur", () => {
          if (!state.quickProblems[`${stage}.${kind}`]) input.value = formatScores(kind, stage);
        });
      }
      for (const button of $all("button[data-action]")) {
        button.addEventListener("click", () => {
          const { action, kind, stage } = button.dataset;
          const list = scoresFor(kind, stage);
          if (action === "copy-rest") {
            const rest = scoresFor(kind, "rest");
            if (rest.every((v) => v === null)) { setStatus("Nothing to copy: rest has no scores yet.", "warn"); return; }
            state.scores[kind][stage] = rest.slice();
            setStatus(`Copied the rest ${kind === "wall_motion" ? "wall-motion" : "perfusion"} scores to ${STAGE_TITLES[stage].toLowerCase()}.`);
          } else if (action === "fill-normal") {
            state.scores[kind][stage] = list.map((v) => (v === null ? 1 : v));
          } else if (action === "clear") {
            state.scores[kind][stage] = [];
          }
          delete state.quickProblems[`${stage}.${kind}`];
          paintMap(kind, stage);
          syncQuick(kind, stage);
          changed();
        });
      }
    }

    function rebuildMaps() {
      for (const svg of $all("svg.bullseye")) buildMap(svg);
      for (const kind of KINDS) for (const stage of STAGES) syncQuick(kind, stage);
    }

    // --- stages -------------------------------------------------------------------------------

    function activate(stage, focusTab) {
      state.active = stage;
      for (const tab of $all('[role="tab"]')) {
        const on = tab.dataset.stage === stage;
        tab.setAttribute("aria-selected", on ? "true" : "false");
        tab.setAttribute("tabindex", on ? "0" : "-1");
        if (on && focusTab) tab.focus();
      }
      for (const panel of $all(".stage")) panel.hidden = panel.dataset.stage !== stage;
    }

    function wireTabs() {
      $all('[role="tab"]').forEach((tab) => {
        tab.addEventListener("click", () => activate(tab.dataset.stage, false));
        tab.addEventListener("keydown", (event) => {
          const tabs = $all('[role="tab"]').filter((t) => !t.hidden);
          const i = tabs.indexOf(tab);
          let j = null;
          if (event.key === "ArrowRight") j = (i + 1) % tabs.length;
          else if (event.key === "ArrowLeft") j = (i - 1 + tabs.length) % tabs.length;
          else if (event.key === "Home") j = 0;
          else if (event.key === "End") j = tabs.length - 1;
          if (j !== null) { event.preventDefault(); activate(tabs[j].dataset.stage, true); }
        });
      });
    }

    // --- the form <-> study data ------------------------------------------------------------------

    function convert(raw, kind) {
      if (kind === "int" && /^[-+]?\d+$/.test(raw)) return Number(raw);
      if (kind === "float") {
        const text = raw.replace(",", ".");
        if (/^[-+]?(\d+\.?\d*|\.\d+)$/.test(text)) return Number(text);
      }
      return raw;
    }

    /** The study as the form holds it (possibly incomplete); unknown keys of an opened file kept. */
    function collect() {
      const data = clone(state.extras) || {};
      data.schema_version = 1;
      for (const el of $all("[data-path]")) {
        const raw = el.value.trim();
        if (raw !== "") setPath(data, el.dataset.path, convert(raw, el.dataset.kind));
      }
      for (const group of $all("[data-list-path]")) {
        const picked = $all('input[type="checkbox"]', group).filter((box) => box.checked).map((box) => box.value);
        if (picked.length) setPath(data, group.dataset.listPath, picked);
      }
      if (state.keptNotes.length) data.kept_notes = state.keptNotes.slice();
      else delete data.kept_notes;
      const stages = isObject(data.stages) ? data.stages : {};
      for (const stage of STAGES) {
        for (const kind of KINDS) {
          const list = state.scores[kind][stage].slice(0, Math.max(segmentCount(), state.scores[kind][stage].length));
          if (list.some((v) => v !== null && v !== undefined)) {
            if (!isObject(stages[stage])) stages[stage] = {};
            stages[stage][kind] = scoresToDocument(list);
          }
        }
      }
      const ordered = {};
      for (const stage of STAGES) if (stage in stages) ordered[stage] = stages[stage];
      for (const stage of Object.keys(stages)) if (!(stage in ordered)) ordered[stage] = stages[stage];
      data.stages = ordered;
      return data;
    }

    function populate(doc) {
      doc = isObject(doc) ? doc : {};
      const extras = clone(doc);
      delete extras.schema_version;
      for (const el of $all("[data-path]")) {
        const value = getPath(doc, el.dataset.path);
        if (el.tagName === "SELECT") {
          const wanted = value === undefined || value === null ? el.options[0].value : String(value);
          el.value = wanted;
          if (el.value !== wanted) {
            // keep a value the list does not offer, so the server can say what is wrong with it
            const option = new Option(wanted, wanted);
            el.add(option);
            el.value = wanted;
          }
        } else {
          el.value = value === undefined || value === null ? "" : String(value);
        }
        deletePath(extras, el.dataset.path);
      }
      for (const group of $all("[data-list-path]")) {
        const value = getPath(doc, group.dataset.listPath);
        const wanted = Array.isArray(value) ? value.map(String) : [];
        for (const want of wanted) {
          if (!$all('input[type="checkbox"]', group).some((box) => box.value === want)) {
            // keep a value the list does not offer, so the server can say what is wrong with it
            const label = document.createElement("label");
            label.className = "check";
            const box = document.createElement("input");
            box.type = "checkbox";
            box.value = want;
            box.addEventListener("change", changed);
            label.append(box, ` ${want}`);
            group.insertBefore(label, $(".field-error", group));
          }
        }
        for (const box of $all('input[type="checkbox"]', group)) box.checked = wanted.includes(box.value);
        deletePath(extras, group.dataset.listPath);
      }
      state.keptNotes = Array.isArray(doc.kept_notes) ? doc.kept_notes.map(String) : [];
      delete extras.kept_notes;
      state.impressionEdited = false;
      state.model = geometry.models[$("#f-segment_model").value] ? $("#f-segment_model").value : "17";
      state.boundaries = null;
      state.quickProblems = {};
      for (const kind of KINDS) {
        for (const stage of STAGES) {
          state.scores[kind][stage] = scoresFromDocument(getPath(doc, `stages.${stage}.${kind}`));
          deletePath(extras, `stages.${stage}.${kind}`);
        }
      }
      state.extras = prune(extras);
      rebuildMaps();
      updateProtocol();
      const first = visibleStages().find((s) => isObject(getPath(doc, `stages.${s}`))) || "rest";
      activate(first, false);
    }

    function blankStudy() {
      const today = new Date();
      const iso = new Date(today.getTime() - today.getTimezoneOffset() * 60000).toISOString().slice(0, 10);
      return { schema_version: 1, study: { date: iso }, segment_model: 17 };
    }

    // --- what the chosen protocol shows (FORM.views, from the study model) -----------------------

    function protocolView() {
      return FORM.views[$("#f-protocol").value] || FORM.views[""];
    }
    function holdsValue(root) {
      return $all("[data-path]", root).some((el) => el.value.trim() !== "");
    }
    function stageHoldsData(stage) {
      return KINDS.some((kind) => scoredCount(kind, stage) > 0) || holdsValue($(`#stage-${stage}`));
    }
    /** Stages of the protocol, plus any other stage that holds data (nothing in a file is hidden). */
    function visibleStages() {
      const view = protocolView();
      return STAGES.filter((stage) => stage in view.stages || stageHoldsData(stage));
    }

    function updateProtocol() {
      const view = protocolView();
      const shown = visibleStages();
      for (const stage of STAGES) {
        STAGE_TITLES[stage] = view.stages[stage] || FORM.views[""].stages[stage];
        $(`#tab-${stage}`).hidden = !shown.includes(stage);
        for (const el of $all(`[data-stage-name="${stage}"]`)) el.textContent = STAGE_TITLES[stage];
        for (const el of $all(`[data-stage-title="${stage}"]`)) el.textContent = STAGE_TITLES[stage].toLowerCase();
      }
      for (const wrap of $all('[data-show^="stage-field:"]')) {
        const name = wrap.dataset.show.slice("stage-field:".length);
        wrap.hidden = !(view.stage_fields.includes(name) || holdsValue(wrap));
      }
      for (const block of ["exercise", "vasodilator"]) {
        const el = $(`#${block}-fields`);
        el.hidden = !(view.blocks.includes(block) || holdsValue(el));
      }
      const agent = $("#f-vasodilator-agent").value;
      for (const wrap of $all('[data-show^="agent:"]')) {
        wrap.hidden = !(wrap.dataset.show === `agent:${agent}` || holdsValue(wrap));
      }
      if (!shown.includes(state.active)) activate(shown[0] || "rest", false);
    }

    // --- problems -----------------------------------------------------------------------------

    function clearProblems() {
      for (const slot of $all("[data-error-for]")) { slot.replaceChildren(); slot.hidden = true; }
      for (const el of $all('[aria-invalid="true"]')) el.removeAttribute("aria-invalid");
      for (const el of $all(".sector.invalid")) el.classList.remove("invalid");
      for (const tab of $all('[role="tab"]')) tab.classList.remove("has-problem");
    }

    function slotFor(path) {
      const keys = path ? path.split(".") : [];
      for (let n = keys.length; n > 0; n -= 1) {
        const prefix = keys.slice(0, n).join(".");
        const slot = $all("[data-error-for]").find((el) => el.dataset.errorFor === prefix && !el.classList.contains("problems"));
        if (slot) return { slot, prefix };
      }
      return { slot: $("#general-problems"), prefix: "" };
    }

    function showProblems(problems) {
      clearProblems();
      const all = problems.slice();
      for (const [where, list] of Object.entries(state.quickProblems)) {
        for (const problem of list) all.push({ location: `stages.${where}`, path: `stages.${where}`, problem });
      }
      for (const p of all) {
        let path = p.path || "";
        const missing = /^required field '([A-Za-z_]+)' is missing$/.exec(p.problem);
        if (missing) path = path ? `${path}.${missing[1]}` : missing[1];
        const { slot, prefix } = slotFor(path);
        const line = document.createElement("span");
        line.className = "problem-line";
        line.textContent = prefix ? p.problem : `${p.location ? p.location + ": " : ""}${p.problem}`;
        slot.appendChild(line);
        slot.hidden = false;
        const control = prefix && ($(`[data-path="${prefix}"]`) || $(`[data-error-path="${prefix}"]`));
        if (control) control.setAttribute("aria-invalid", "true");
        const parts = path.split(".");
        if (parts[0] === "stages" && parts[1]) {
          const tab = $(`#tab-${parts[1]}`);
          if (tab) tab.classList.add("has-problem");
          const segment = /^segment (\d+)/.exec(p.problem);
          const svg = parts[2] ? mapSvg(parts[2], parts[1]) : null;
          if (segment && svg) {
            const sector = $(`.sector[data-segment="${segment[1]}"]`, svg);
            if (sector) sector.classList.add("invalid");
          }
        }
      }
      return all.length;
    }

    // --- live analysis ------------------------------------------------------------------------

    const fixed2 = (v) => (typeof v === "number" ? v.toFixed(2) : "–");

    function scoredCount(kind, stage) {
      return scoresFor(kind, stage).filter((v) => v !== null && v !== undefined).length;
    }

    function showStageCounts(record) {
      for (const stage of STAGES) {
        const tabText = $(`[data-tab-wmsi="${stage}"]`);
        const count = scoredCount("wall_motion", stage);
        const wmsi = record && record.wmsi[stage];
        tabText.textContent = typeof wmsi === "number" ? `WMSI ${wmsi.toFixed(2)}` : count ? `${count}/${segmentCount()} scored` : "not scored";
        const out = $(`[data-wmsi="${stage}"]`);
        out.textContent = typeof wmsi === "number" ? `${wmsi.toFixed(2)} (${record.wmsi_scored_segments[stage]} scored)` : "–";
        const extent = record && record.perfusion.defect_extent_percent[stage];
        $(`[data-extent="${stage}"]`).textContent = typeof extent === "number" ? `${Math.round(extent)} %` : "–";
      }
    }

    function row(cells) {
      const tr = document.createElement("tr");
      cells.forEach((text, i) => {
        const cell = document.createElement(i === 0 ? "th" : "td");
        if (i === 0) cell.scope = "row";
        cell.textContent = text;
        tr.appendChild(cell);
      });
      return tr;
    }

    function fillList(listId, blockId, items) {
      const list = $(listId);
      list.replaceChildren();
      for (const text of items) {
        const li = document.createElement("li");
        li.textContent = text;
        list.appendChild(li);
      }
      $(blockId).hidden = items.length === 0;
    }

    function showResults(result) {
      const record = result.record;
      $("#results").hidden = false;
      $("#results").classList.remove("stale");
      const state_ = $("#analysis-state");
      state_.textContent = `Up to date · ${clock()}`;
      state_.dataset.kind = "ok";
      const conclusion = $("#conclusion");
      conclusion.textContent = result.summary;
      conclusion.dataset.status = record.conclusion.status;
      const wmsiBody = $("#wmsi-table tbody");
      wmsiBody.replaceChildren();
      for (const stage of record.stages) {
        const h = record.haemodynamics[stage] || {};
        wmsiBody.appendChild(row([
          STAGE_TITLES[stage] || stage,
          fixed2(record.wmsi[stage]),
          record.wmsi_scored_segments[stage] === undefined ? "–" : String(record.wmsi_scored_segments[stage]),
          h.heart_rate_bpm == null ? "–" : String(h.heart_rate_bpm),
          h.rate_pressure_product == null ? "–" : String(h.rate_pressure_product),
        ]));
      }
      const terrBody = $("#territory-table tbody");
      terrBody.replaceChildren();
      for (const [name, t] of Object.entries(record.territories)) {
        const wm = t.wmsi;
        terrBody.appendChild(row([
          name,
          t.segments.join(", "),
          `${fixed2(wm.rest)} → ${fixed2(wm.peak)}`,
          t.ischemic_segments.length ? t.ischemic_segments.join(", ") : "none",
        ]));
      }
      $("#map-used").textContent = `Territory map: ${record.territory_map.title}`;
      $("#stress-note").textContent = record.stress.adequacy_note;
      fillList("#findings", "#findings-block", record.conclusion.high_risk_findings.map((f) => f.detail));
      showNotes(record.notes);
      showImpression(result);
      $("#narrative").textContent = result.narrative_text;
      state.boundaries = result.territory_boundaries;
      for (const path of $all("svg.bullseye .boundary")) path.setAttribute("d", state.boundaries);
      showStageCounts(record);
      if (options.onResult) options.onResult(result);
    }

    function showRefused(count) {
      const el = $("#analysis-state");
      el.textContent = `Not computed: ${count} problem${count === 1 ? "" : "s"} to fix (shown beside the fields).`;
      el.dataset.kind = "problem";
      $("#results").classList.add("stale");
      showStageCounts(null);
    }

    // --- reader notes: kept in the report or not (kept_notes) -----------------------------------

    function showNotes(notes) {
      const list = $("#notes");
      list.replaceChildren();
      for (const note of notes) {
        const li = document.createElement("li");
        const text = document.createElement("span");
        text.textContent = note.text;
        li.appendChild(text);
        if (FORM.referrer_notes.includes(note.kind)) {
          const always = document.createElement("span");
          always.className = "hint";
          always.textContent = " (always in the report)";
          li.appendChild(always);
        } else {
          const label = document.createElement("label");
          label.className = "keep";
          const box = document.createElement("input");
          box.type = "checkbox";
          box.dataset.keepNote = note.kind;
          box.checked = state.keptNotes.includes(note.kind);
          box.disabled = state.readOnly;
          box.addEventListener("change", () => {
            const kept = new Set(state.keptNotes);
            if (box.checked) kept.add(note.kind); else kept.delete(note.kind);
            state.keptNotes = FORM.note_kinds.filter((k) => kept.has(k));
            for (const other of $all(`[data-keep-note="${note.kind}"]`)) other.checked = box.checked;
            changed();
          });
          label.append(box, " keep in report");
          li.appendChild(label);
        }
        list.appendChild(li);
      }
      $("#notes-block").hidden = notes.length === 0;
    }

    // --- the reader's impression: computed draft, own words, confirmation, phrases ---------------

    function impressionWritten() {
      return IMPRESSION_BOXES.some((name) => $(`#f-${name}`).value.trim() !== "");
    }

    function showImpressionState() {
      const el = $("#impression-state");
      const status = state.impressionEdited && impressionWritten() ? "edited" : state.impressionStatus;
      el.textContent = IMPRESSION_WORDS[status] || IMPRESSION_WORDS.none;
      el.dataset.status = status;
      $("#impression-block").classList.toggle("stale", status === "stale");
      $("#confirm-impression").disabled = state.readOnly || !impressionWritten();
    }

    function showImpression(result) {
      const record = result.record;
      state.computedImpression = record.computed_impression || "";
      state.impressionStatus = record.impression_status || "none";
      $("#computed-impression").textContent = state.computedImpression;
      state.phrases = result.phrases || [];
      showPhrases();
      showImpressionState();
    }

    function impressionEdited() {
      state.impressionEdited = true;
      showImpressionState();
    }

    /** Ask the server for the basis hash of the findings computed now, and keep it in the study. */
    async function confirmImpression(data) {
      const body = data || collect();
      const response = await request("/api/impression/confirm", {
        method: "POST",
        headers: { "content-type": "application/json" },
        body: JSON.stringify(body),
      });
      const answer = await response.json();
      if (!response.ok) {
        const count = showProblems(answer.problems || []);
        setStatus(`Impression not confirmed: ${count ? `${count} problem${count === 1 ? "" : "s"} to fix` : answer.detail}`, "problem");
        return null;
      }
      state.extras.impression_basis_sha256 = answer.impression_basis_sha256;
      state.extras.computed_impression = answer.computed_impression;
      state.impressionEdited = false;
      state.impressionStatus = answer.impression_status;
      showImpressionState();
      analyzeSoon.cancel();
      runAnalysis(); // newer than any analysis still on its way, which would show the old status
      return answer;
    }

    function dropConfirmation() {
      delete state.extras.impression_basis_sha256;
      delete state.extras.computed_impression;
      state.impressionEdited = false;
    }

    function phraseText(code) {
      const filled = state.phrases.find((p) => p.code === code);
      if (filled) return filled.text;
      const raw = state.rawPhrases.find((p) => p.code === code);
      return raw ? raw.text : null;
    }

    function insertInto(box, text, from, to) {
      const start = from === undefined ? box.selectionStart : from;
      const end = to === undefined ? box.selectionEnd : to;
      const before = box.value.slice(0, start);
      const gap = before && !/\s$/.test(before) ? " " : "";
      box.value = before + gap + text + box.value.slice(end);
      const caret = (before + gap + text).length;
      box.setSelectionRange(caret, caret);
      box.dispatchEvent(new Event("input", { bubbles: true }));
    }

    function showPhrases() {
      const list = $("#phrase-list");
      const phrases = state.phrases.length ? state.phrases : state.rawPhrases;
      list.replaceChildren();
      for (const phrase of phrases) {
        const li = document.createElement("li");
        const button = document.createElement("button");
        button.type = "button";
        button.className = "phrase";
        button.dataset.code = phrase.code;
        const code = document.createElement("code");
        code.textContent = phrase.code;
        const title = document.createElement("span");
        title.className = "phrase-title";
        title.textContent = phrase.title;
        button.append(code, " ", title);
        button.title = phrase.text;
        button.addEventListener("mousedown", (event) => event.preventDefault()); // keep the caret
        button.disabled = state.readOnly;
        button.addEventListener("click", () => {
          if (state.readOnly) return;
          const target = phrase.field === "either" ? state.lastBox : phrase.field;
          const box = $(`#f-${target}`);
          insertInto(box, phraseText(phrase.code) || phrase.text, box.value.length, box.value.length);
          box.focus();
        });
        li.appendChild(button);
        list.appendChild(li);
      }
    }

    async function loadPhrases() {
      try {
        const response = await request("/api/phrases");
        const answer = await response.json();
        state.rawPhrases = answer.phrases || [];
        $("#phrase-source").textContent = `(${answer.source}, ${state.rawPhrases.length})`;
        if (!state.phrases.length) showPhrases();
      } catch (error) { /* the list stays empty */ }
    }

    /** A phrase code typed before the caret, followed by space, Enter or Tab, becomes its text. */
    function expandCode(event) {
      if (!(event.key === " " || event.key === "Enter" || event.key === "Tab") || event.ctrlKey || event.metaKey || event.altKey) return;
      const box = event.target;
      const caret = box.selectionStart;
      if (caret !== box.selectionEnd) return;
      const found = /(^|\s)(\.[a-z0-9][a-z0-9-]*)$/.exec(box.value.slice(0, caret));
      if (!found) return;
      const text = phraseText(found[2]);
      if (text === null) return;
      event.preventDefault();
      insertInto(box, text + (event.key === " " ? " " : ""), caret - found[2].length, caret);
    }

    function wireImpression() {
      for (const name of IMPRESSION_BOXES) {
        const box = $(`#f-${name}`);
        box.addEventListener("focus", () => { state.lastBox = name; });
        box.addEventListener("keydown", expandCode);
        box.addEventListener("input", impressionEdited);
      }
      $("#accept-computed").addEventListener("click", () => {
        const box = $("#f-impression");
        if (!state.computedImpression) { setStatus("No computed draft yet: enter scores first.", "warn"); return; }
        if (box.value.trim() && box.value.trim() !== state.computedImpression.trim()
            && !window.confirm("Replace the impression you wrote with the computed draft?")) return;
        box.value = state.computedImpression;
        box.dispatchEvent(new Event("input", { bubbles: true }));
        box.focus();
      });
      $("#confirm-impression").addEventListener("click", async () => {
        if (await confirmImpression()) {
          changed();
          setStatus("Impression confirmed against the current findings; save to keep it.", "ok");
        }
      });
    }

    async function runAnalysis() {
      const seq = ++state.analysisSeq;
      const body = collect();
      let response;
      let answer;
      try {
        response = await request("/api/analyze", {
          method: "POST",
          headers: { "content-type": "application/json" },
          body: JSON.stringify(body),
        });
        answer = await response.json();
      } catch (error) {
        if (seq === state.analysisSeq) setStatus(`The server did not answer (${error.message}); your entries are kept in this browser.`, "problem");
        return;
      }
      if (seq !== state.analysisSeq) return;
      if (response.ok) {
        const count = showProblems([]);
        if (count) showRefused(count);
        else showResults(answer);
      } else {
        const problems = answer.problems && answer.problems.length ? answer.problems : [{ location: "", path: "", problem: answer.detail || `error ${response.status}` }];
        showRefused(showProblems(problems));
      }
    }
    const analyzeSoon = debounce(runAnalysis, ANALYZE_DELAY_MS);

    function changed() {
      if (state.readOnly) return;
      state.dirty = true;
      onChange();
      analyzeSoon();
    }

    /** Before a save: confirm edited impression words against the findings computed now (the
     *  server's hash) and carry the confirmation in ``data``; false when it could not be confirmed. */
    async function withImpression(data) {
      if (!impressionWritten()) {
        if (state.extras.impression_basis_sha256 !== undefined) dropConfirmation();
      } else if (state.impressionEdited) {
        if (!(await confirmImpression(data))) return false;
      }
      Object.assign(data, prune(clone({
        impression_basis_sha256: state.extras.impression_basis_sha256,
        computed_impression: state.extras.computed_impression,
      })));
      if (state.extras.impression_basis_sha256 === undefined) {
        delete data.impression_basis_sha256;
        delete data.computed_impression;
      }
      return true;
    }

    /** ``doc`` with every score set as a mapping by segment number, the form collect() writes, so
     *  two versions of a study compare field by field whatever form their scores were typed in. */
    function normalise(doc) {
      const out = clone(isObject(doc) ? doc : {});
      for (const stage of Object.keys(isObject(out.stages) ? out.stages : {})) {
        for (const kind of KINDS) {
          const value = getPath(out, `stages.${stage}.${kind}`);
          if (value !== undefined && value !== null) out.stages[stage][kind] = scoresToDocument(scoresFromDocument(value));
        }
      }
      return out;
    }

    /** A signed study is shown, not edited: every control of the editor is switched off (the stage
     *  tabs and the folding blocks stay, to look around). */
    function setReadOnly(on) {
      state.readOnly = Boolean(on);
      const root = $("#editor");
      root.classList.toggle("read-only", state.readOnly);
      for (const el of $all("input, select, textarea, button", root)) {
        if (el.getAttribute("role") === "tab") continue;
        el.disabled = state.readOnly;
      }
      for (const el of $all("svg.bullseye .sector", root)) el.setAttribute("aria-disabled", state.readOnly ? "true" : "false");
      if (!state.readOnly) showImpressionState();
    }

    function wireEditor() {
      for (const el of $all("[data-path]")) {
        el.addEventListener("input", changed);
        el.addEventListener("change", changed);
      }
      $("#f-segment_model").addEventListener("change", () => {
        state.model = $("#f-segment_model").value;
        state.boundaries = null;
        rebuildMaps();
      });
      $("#f-wall_motion_scale").addEventListener("change", () => { for (const stage of STAGES) paintMap("wall_motion", stage); });
      $("#f-territory_map").addEventListener("change", () => {
        state.boundaries = null;
        for (const path of $all("svg.bullseye .boundary")) path.setAttribute("d", currentBoundaries());
      });
      $("#f-protocol").addEventListener("change", updateProtocol);
      $("#f-vasodilator-agent").addEventListener("change", updateProtocol);
      for (const group of $all("[data-list-path]")) group.addEventListener("change", changed);
      wireImpression();
      for (const swatch of $all("[data-swatch]")) {
        const [kind, score] = swatch.dataset.swatch.split(":");
        const entry = score ? palette[kind][score] : palette[kind];
        swatch.classList.add(kind === "not_seen" ? "hatched" : "filled");
        if (kind !== "not_seen") swatch.style.backgroundColor = entry.fill;
      }
    }

    wireTabs();
    wireEditor();
    rebuildMaps();
    wireMaps();
    if (options.loadPhrases !== false) loadPhrases();

    return {
      state,
      collect,
      populate,
      blankStudy,
      changed,
      showProblems,
      showRefused,
      showStageCounts,
      runAnalysis,
      analyzeSoon,
      withImpression,
      normalise,
      setReadOnly,
      loadPhrases,
      stageTitle: (stage) => STAGE_TITLES[stage] || stage,
    };
  }

  window.SegreportEditor = { create, $, $all, clone, isObject, getPath, prune, clock, setStatus, debounce, readJson };
})();
