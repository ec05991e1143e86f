/* segreport score entry over a studies folder: open, autosave drafts, save, conflicts, report.
 *
 * The editor itself (maps, form, live analysis, impression) is static/editor.js; this script adds
 * what the folder page does with it. User text is only ever set with textContent or attribute
 * values, never parsed as markup.
 */
(function () {
  "use strict";

  const { $, $all, clone, isObject, clock, setStatus, debounce, readJson } = window.SegreportEditor;
  const ID_RULE = /^[A-Za-z0-9._-]{1,64}$/;
  const CLIENT_RULE = /^t[0-9a-f]{16}$/;
  const LOCAL_PREFIX = "segreport:draft:";
  const TAB_CLIENT = "segreport:client";
  const TAB_LAST = "segreport:last";
  const TAB_SEQ = "segreport:draft-seq";
  const DRAFT_DELAY_MS = 1200;

  const state = {
    openedFrom: null,
    etag: null,
    base: null,
    conflict: null,
    client: null,
    draftKey: null,
  };
  const editor = window.SegreportEditor.create({ onChange: changed });
  const { collect, populate, blankStudy, showProblems, showRefused, showStageCounts, runAnalysis } = editor;

  // --- drafts (one namespace per browser tab) -------------------------------------------------
  //
  // Every tab has its own client id (sessionStorage is per tab), and its drafts are named
  // `<client>-<n>`; the server refuses a draft write or removal from another client id, so one
  // tab never overwrites or deletes another tab's work. A draft carries the version its edits
  // start from (base_etag and base), so a draft restored later is still saved with If-Match.

  function clientId() {
    try {
      let id = sessionStorage.getItem(TAB_CLIENT);
      if (!id || !CLIENT_RULE.test(id)) {
        const bytes = new Uint8Array(8);
        crypto.getRandomValues(bytes);
        id = "t" + Array.from(bytes, (b) => b.toString(16).padStart(2, "0")).join("");
        sessionStorage.setItem(TAB_CLIENT, id);
      }
      return id;
    } catch (error) {
      return state.client || "t" + Math.random().toString(16).slice(2, 18);
    }
  }

  function newDraftKey() {
    let n = 1;
    try {
      n = Number(sessionStorage.getItem(TAB_SEQ) || "0") + 1;
      sessionStorage.setItem(TAB_SEQ, String(n));
    } catch (error) { n = Date.now(); }
    return `${state.client}-${n}`;
  }

  function draftBody() {
    return {
      study: collect(),
      opened_from: state.openedFrom,
      base_etag: state.etag,
      base: state.base,
      saved_at: new Date().toISOString(),
    };
  }

  function saveLocal(key, draft) {
    try {
      localStorage.setItem(LOCAL_PREFIX + key, JSON.stringify(draft));
      sessionStorage.setItem(TAB_LAST, key);
    } catch (error) {
      /* storage full or switched off: the server copy still follows */
    }
  }
  function dropLocal(key) {
    try {
      localStorage.removeItem(LOCAL_PREFIX + key);
      if (sessionStorage.getItem(TAB_LAST) === key) sessionStorage.removeItem(TAB_LAST);
    } catch (error) { /* nothing to drop */ }
  }

  const tabHeaders = () => ({ "content-type": "application/json", "x-client-id": state.client });

  async function sendDraft(quiet) {
    if (!editor.state.dirty || !state.draftKey) return;
    const key = state.draftKey;
    try {
      const response = await fetch(`/api/drafts/${encodeURIComponent(key)}`, {
        method: "PUT",
        headers: tabHeaders(),
        body: JSON.stringify(draftBody()),
      });
      if (!response.ok) throw new Error(`status ${response.status}`);
      if (!quiet) setStatus(`Draft autosaved ${clock()} (this tab's draft ${key}, in this browser and the studies folder)`, "ok");
    } catch (error) {
      setStatus(`Draft kept in this browser only (${error.message})`, "warn");
    }
  }
  const draftSoon = debounce(sendDraft, DRAFT_DELAY_MS);

  async function deleteDraft(key) {
    dropLocal(key);
    try {
      await fetch(`/api/drafts/${encodeURIComponent(key)}`, { method: "DELETE", headers: tabHeaders() });
    } catch (error) { /* offline */ }
  }

  /** After every edit (called by the editor, which also starts the live analysis). */
  function changed() {
    if (!state.draftKey) state.draftKey = newDraftKey();
    saveLocal(state.draftKey, draftBody());
    draftSoon();
  }

  // --- files --------------------------------------------------------------------------------

  async function refreshList() {
    try {
      const response = await fetch("/api/studies");
      const listing = await response.json();
      const studies = $("#open-studies");
      const drafts = $("#open-drafts");
      studies.replaceChildren();
      drafts.replaceChildren();
      for (const s of listing.studies) {
        const label = [s.id, s.date, s.patient].filter(Boolean).join(" · ") + (s.valid === false ? " (cannot be read)" : "");
        studies.appendChild(new Option(label, `study:${s.id}`));
      }
      for (const d of listing.drafts) drafts.appendChild(new Option(draftLabel(d), `draft:${d.id}`));
    } catch (error) { /* the list stays as it was */ }
  }

  function draftLabel(d) {
    const mine = d.id.startsWith(`${state.client}-`) ? "this tab" : "another tab";
    return `${d.study_id || "untitled"} · draft (${mine}, ${d.id})`;
  }

  /** Show ``doc`` as the tab's document; ``version`` is {from, etag, base} of the stored study. */
  function opened(doc, version, problems, message) {
    populate(doc);
    state.openedFrom = version.from || null;
    state.etag = version.etag || null;
    state.base = version.base || null;
    editor.state.dirty = false;
    state.draftKey = null;
    showProblems(problems || []);
    hideConflict();
    setStatus(message, "ok");
    runAnalysis();
  }

  function storedVersion(answer) {
    return { from: answer.id, etag: answer.etag, base: answer.study };
  }

  async function openSelected() {
    const value = $("#open-select").value;
    if (!value) { setStatus("Choose a study file or draft to open.", "warn"); return; }
    const [what, id] = [value.slice(0, value.indexOf(":")), value.slice(value.indexOf(":") + 1)];
    const url = what === "study" ? `/api/studies/${encodeURIComponent(id)}` : `/api/drafts/${encodeURIComponent(id)}`;
    const response = await fetch(url);
    const answer = await response.json();
    if (!response.ok) { setStatus(`Cannot open ${id}: ${answer.detail}`, "problem"); showProblems(answer.problems || []); return; }
    if (what === "study") {
      opened(answer.study, storedVersion(answer), answer.problems, `Opened ${answer.file}${answer.problems.length ? ` — ${answer.problems.length} problem(s) to fix` : ""}`);
      history.replaceState(null, "", `/?study=${encodeURIComponent(answer.id)}`);
    } else {
      const form = answer.form || {};
      const version = { from: form.opened_from || null, etag: form.base_etag || null, base: form.base || null };
      opened(form.study, version, [], `Opened the draft ${id} (autosaved ${answer.saved_at || "earlier"}); this tab keeps its own copy from now on`);
      changed(); // a new draft of this tab: the opened one stays as it was
      history.replaceState(null, "", "/");
    }
  }

  /** Where a save goes: the file the study was opened from, unless the id was changed. */
  function saveTarget(id) {
    const fileId = state.base && state.base.study ? state.base.study.id : state.openedFrom;
    if (state.openedFrom && (id === state.openedFrom || id === fileId)) return { to: state.openedFrom, etag: state.etag };
    return { to: id, etag: null };
  }

  async function putStudy(to, data, etag) {
    const headers = { "content-type": "application/json" };
    if (etag) headers["if-match"] = etag;
    const response = await fetch(`/api/studies/${encodeURIComponent(to)}`, {
      method: "PUT",
      headers,
      body: JSON.stringify(data),
    });
    return { response, answer: await response.json() };
  }

  async function save(options) {
    const data = (options && options.data) || collect();
    const id = data.study && data.study.id;
    if (typeof id !== "string" || !id) {
      showProblems([{ location: "study: study.id", path: "study.id", problem: "enter a study id before saving; it names the file" }]);
      $("#f-study-id").focus();
      setStatus("Not saved: the study needs an id.", "problem");
      return false;
    }
    if (!ID_RULE.test(id) || id === "." || id === "..") {
      await runAnalysis(); // the server words the id rule
      setStatus("Not saved: the study id cannot name a file.", "problem");
      return false;
    }
    if (!(options && options.data) && !(await editor.withImpression(data))) return false;
    const target = (options && options.to) ? { to: options.to, etag: options.etag || null } : saveTarget(id);
    const { response, answer } = await putStudy(target.to, data, target.etag);
    if (response.status === 428 && !target.etag) {
      // a new study whose id names an existing file: replace it only when asked, and only the
      // version looked at now (If-Match), so a change made meanwhile is still caught
      if (!window.confirm(`A study file for ${target.to} already exists in the folder. Replace it with this study?`)) {
        setStatus("Not saved: choose another study id, or open the existing file.", "warn");
        return false;
      }
      const current = await fetch(`/api/studies/${encodeURIComponent(target.to)}`);
      if (!current.ok) { setStatus(`Not saved: ${target.to} cannot be read to replace it.`, "problem"); return false; }
      return save({ data, to: target.to, etag: current.headers.get("etag") });
    }
    if (response.status === 412 || response.status === 428) {
      showConflict(answer, data, target.to);
      return false;
    }
    if (!response.ok) {
      const count = showProblems(answer.problems || []);
      showRefused(count);
      setStatus(`Not saved: ${count} problem${count === 1 ? "" : "s"} to fix (shown beside the fields).`, "problem");
      return false;
    }
    const key = state.draftKey;
    state.openedFrom = answer.id;
    state.etag = answer.etag;
    state.base = answer.study;
    editor.state.dirty = false;
    state.draftKey = null;
    if (key) deleteDraft(key); // this tab's own draft only
    hideConflict();
    setStatus(`Saved ${answer.file} in the studies folder · ${clock()}`, "ok");
    history.replaceState(null, "", `/?study=${encodeURIComponent(answer.id)}`);
    refreshList();
    return true;
  }

  // --- a save refused because the study changed (412) ---------------------------------------

  /** Dotted paths and values of a study document, for comparing two versions field by field. */
  function flatten(value, prefix, out) {
    out = out || {};
    if (isObject(value)) {
      for (const [key, item] of Object.entries(value)) flatten(item, prefix ? `${prefix}.${key}` : key, out);
    } else if (prefix) {
      out[prefix] = Array.isArray(value) ? JSON.stringify(value) : String(value);
    }
    return out;
  }

  function differences(before, after) {
    const a = flatten(before || {}, "");
    const b = flatten(after || {}, "");
    const lines = [];
    for (const key of Array.from(new Set([...Object.keys(a), ...Object.keys(b)])).sort()) {
      if (a[key] === b[key]) continue;
      const was = key in a ? `“${a[key]}”` : "(empty)";
      const now = key in b ? `“${b[key]}”` : "(removed)";
      lines.push(`${key}: ${was} → ${now}`);
    }
    return lines;
  }

  function suggestCopyId(id) {
    const base = String(id || "study").replace(/-copy\d*$/, "").slice(0, 56);
    const taken = new Set($all("#open-studies option").map((o) => o.value.slice("study:".length)));
    for (let n = 1; n < 100; n += 1) {
      const name = n === 1 ? `${base}-copy` : `${base}-copy${n}`;
      if (!taken.has(name)) return name;
    }
    return `${base}-copy`;
  }

  function showConflict(answer, data, to) {
    const panel = $("#conflict");
    const current = answer.current;
    state.conflict = { data, to, current };
    $("#conflict-title").textContent = `Not saved: ${to} changed since you opened it`;
    let lines;
    if (current) {
      lines = differences(state.base, current.study);
      $("#conflict-detail").textContent = lines.length
        ? `Someone else saved it meanwhile (another tab, another reader or an editor). What changed in the stored file since you opened it:`
        : "The stored file was rewritten since you opened it (its fields read the same).";
    } else {
      lines = [];
      $("#conflict-detail").textContent = answer.detail && answer.detail.includes("removed")
        ? "The stored file was removed since you opened it."
        : answer.detail || "The stored study cannot be compared.";
    }
    const list = $("#conflict-changes");
    list.replaceChildren();
    for (const text of lines.slice(0, 20)) {
      const li = document.createElement("li");
      li.textContent = text;
      list.appendChild(li);
    }
    if (lines.length > 20) {
      const li = document.createElement("li");
      li.textContent = `… and ${lines.length - 20} more`;
      list.appendChild(li);
    }
    $("#conflict-reload").hidden = !current;
    $("#conflict-copy-id").value = suggestCopyId(data.study && data.study.id);
    panel.hidden = false;
    setStatus("Not saved: the study changed since you opened it. Your entries are kept in this tab's draft.", "problem");
    draftSoon.cancel();
    sendDraft(true);
    $("#conflict-copy-id").focus();
  }

  function hideConflict() {
    $("#conflict").hidden = true;
    state.conflict = null;
  }

  async function reloadStored() {
    const conflict = state.conflict;
    if (!conflict || !conflict.current) return;
    // keep this tab's edits as its draft (listed under the drafts), then show the stored version
    draftSoon.cancel();
    await sendDraft(true);
    const kept = state.draftKey;
    const current = conflict.current;
    opened(current.study, storedVersion(current), current.problems, `Reloaded ${current.file} as stored now${kept ? `; your edits stay in the draft ${kept}` : ""}.`);
    history.replaceState(null, "", `/?study=${encodeURIComponent(current.id)}`);
    refreshList();
  }

  async function saveCopy() {
    const conflict = state.conflict;
    if (!conflict) return;
    const copyId = $("#conflict-copy-id").value.trim();
    if (!ID_RULE.test(copyId) || copyId === "." || copyId === "..") {
      setStatus("The copy needs a study id of letters, digits, '.', '_' or '-'.", "problem");
      return;
    }
    const data = clone(conflict.data);
    data.study = { ...(data.study || {}), id: copyId };
    const { response, answer } = await putStudy(copyId, data, null);
    if (response.status === 428) {
      setStatus(`A study file for ${copyId} exists already; choose another id for the copy.`, "problem");
      return;
    }
    if (!response.ok) {
      setStatus(`Copy not saved: ${answer.detail}`, "problem");
      return;
    }
    const key = state.draftKey;
    populate(data);
    state.openedFrom = answer.id;
    state.etag = answer.etag;
    state.base = answer.study;
    editor.state.dirty = false;
    state.draftKey = null;
    if (key) deleteDraft(key);
    hideConflict();
    setStatus(`Saved your version as ${answer.file}; ${conflict.to} is left as stored · ${clock()}`, "ok");
    history.replaceState(null, "", `/?study=${encodeURIComponent(answer.id)}`);
    refreshList();
  }

  async function makeReport() {
    const button = $("#report-button");
    button.disabled = true;
    try {
      if (!(await save())) return;
      const id = state.openedFrom;
      setStatus(`Writing the report of ${id}…`);
      const response = await fetch(`/api/studies/${encodeURIComponent(id)}/report`, { method: "POST" });
      const answer = await response.json();
      if (!response.ok) {
        showProblems(answer.problems || []);
        setStatus(`No report: ${answer.detail}`, "problem");
        return;
      }
      const link = $("#report-link");
      link.href = answer.pdf;
      link.textContent = `Open ${id}.pdf`;
      link.hidden = false;
      setStatus(`Report written: ${answer.files.length} files in the reports folder · ${clock()}`, "ok");
      window.open(answer.pdf, "_blank", "noopener");
    } finally {
      button.disabled = false;
    }
  }

  function startNew() {
    if (editor.state.dirty && !window.confirm("Start a new study? The current entries stay in this tab's autosaved draft.")) return;
    draftSoon.flush();
    populate(blankStudy());
    state.openedFrom = null;
    state.etag = null;
    state.base = null;
    editor.state.dirty = false;
    state.draftKey = null;
    showProblems([]);
    hideConflict();
    $("#results").hidden = true;
    $("#analysis-state").textContent = "Enter scores to see the analysis.";
    $("#report-link").hidden = true;
    history.replaceState(null, "", "/");
    setStatus("New study.");
    $("#f-study-id").focus();
  }

  // --- start --------------------------------------------------------------------------------

  function wireToolbar() {
    $("#open-button").addEventListener("click", openSelected);
    $("#new-button").addEventListener("click", startNew);
    $("#save-button").addEventListener("click", () => save());
    $("#conflict-reload").addEventListener("click", reloadStored);
    $("#conflict-copy").addEventListener("click", saveCopy);
    $("#conflict-close").addEventListener("click", hideConflict);
    $("#report-button").addEventListener("click", makeReport);
    window.addEventListener("beforeunload", () => { if (editor.state.dirty) draftSoon.flush(); });
  }

  /** This tab's own unsaved draft, after a reload of the tab (never another tab's). */
  function restoreLocal() {
    try {
      const key = sessionStorage.getItem(TAB_LAST);
      const draft = key && key.startsWith(`${state.client}-`) && JSON.parse(localStorage.getItem(LOCAL_PREFIX + key) || "null");
      if (draft && isObject(draft.study)) return { key, draft };
    } catch (error) { /* nothing stored */ }
    return null;
  }

  function start() {
    state.client = clientId();
    wireToolbar();
    const initial = readJson("initial");
    const initialProblems = readJson("initial-problems") || [];
    const local = restoreLocal();
    if (local && (!initial || local.draft.opened_from === initial.id)) {
      const d = local.draft;
      opened(d.study, { from: d.opened_from, etag: d.base_etag, base: d.base }, [], `Restored this tab's unsaved draft${d.saved_at ? ` from ${clock(new Date(d.saved_at))}` : ""}.`);
      editor.state.dirty = true;
      state.draftKey = local.key;
    } else if (initial) {
      opened(initial.study, storedVersion(initial), initial.problems, `Opened ${initial.file}`);
    } else {
      populate(blankStudy());
      showStageCounts(null);
    }
    if (initialProblems.length) showProblems(initialProblems);
  }

  start();
})();
