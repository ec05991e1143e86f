/* segreport lab page: sign-in, worklist, the shared score editor over the store, conflicts,
 * signing, amendments and addenda, history and audit, users.
 *
 * The session lives in an HttpOnly cookie the script never sees; every state-changing request
 * carries the session's CSRF token (X-CSRF-Token) and every save the version it was based on
 * (If-Match). Nothing about a person or a study is kept in browser storage. User text is only
 * ever set with textContent or attribute values, never parsed as markup.
 */
(function () {
  "use strict";

  const E = window.SegreportEditor;
  const { $, $all, clone, isObject, setStatus, readJson } = E;
  const LAB = readJson("lab") || {};
  const PAGE_SIZE = 50;
  const AUDIT_PAGE = 100;
  const IDLE_CHECK_MS = 5000;
  const STATUS_WORDS = { unread: "unread", preliminary: "preliminary", signed: "signed", amended: "amended" };
  /** A version's own status (FHIR DiagnosticReport.status) in the page's words. */
  const VERSION_WORDS = {
    preliminary: "preliminary",
    final: "signed",
    amended: "amended",
    corrected: "corrected",
    appended: "addendum",
  };

  const CHANGE_WORDS = {
    new: "new ischaemia",
    unchanged: "ischaemia unchanged",
    improved: "ischaemia in fewer segments",
    worsened: "ischaemia in more segments",
    resolved: "ischaemia resolved",
    none: "no ischaemia then or now",
  };

  const session = { info: null, idleMs: 0, lastActive: 0, timer: null, kept: null };
  const study = {
    id: null, etag: null, base: null, version: null, status: null, readOnly: true,
    answer: null, conflict: null, amending: null, isNew: false,
  };
  const list = { offset: 0, total: 0, readers: new Set() };
  const audit = { after: 0 };

  // --- talking to the server ------------------------------------------------------------------

  const UNSAFE = new Set(["POST", "PUT", "PATCH", "DELETE"]);

  /** fetch with the session's CSRF token on every state-changing request; a 401 that is not a
   *  wrong password (the session is still there) ends the page's session. */
  async function send(url, init) {
    init = Object.assign({ credentials: "same-origin" }, init || {});
    const headers = Object.assign({}, init.headers || {});
    const method = (init.method || "GET").toUpperCase();
    if (UNSAFE.has(method) && session.info) headers["x-csrf-token"] = session.info.csrf_token;
    if (init.body !== undefined && typeof init.body !== "string") {
      init.body = JSON.stringify(init.body);
      headers["content-type"] = "application/json";
    }
    init.headers = headers;
    const response = await window.fetch(url, init);
    if (response.status === 401 && session.info && !init.signingIn) {
      const still = await window.fetch("/api/session", { credentials: "same-origin" });
      if (!still.ok) ended("Your session has ended (signed out elsewhere, timed out or locked). Sign in again.");
    }
    return response;
  }

  async function call(url, init) {
    const response = await send(url, init);
    let answer = null;
    if (response.status !== 204) {
      try { answer = await response.json(); } catch (error) { answer = null; }
    }
    return { response, answer: answer || {} };
  }

  const studyUrl = (id, rest) => `/api/studies/${encodeURIComponent(id)}${rest || ""}`;

  function refusal(answer, response) {
    const problems = (answer.problems || []).map((p) => p.problem).filter(Boolean);
    const detail = answer.detail || `the server answered ${response.status}`;
    return problems.length && !problems.includes(detail) ? `${detail}: ${problems.join("; ")}` : detail;
  }

  // --- small helpers --------------------------------------------------------------------------

  function cell(tr, text, header) {
    const el = document.createElement(header ? "th" : "td");
    if (header) el.scope = "row";
    if (text instanceof Node) el.appendChild(text);
    else el.textContent = text === null || text === undefined || text === "" ? "–" : String(text);
    tr.appendChild(el);
    return el;
  }
  function link(text, href, external) {
    const a = document.createElement("a");
    a.textContent = text;
    a.href = href;
    if (external) { a.target = "_blank"; a.rel = "noopener"; }
    return a;
  }
  function badge(status, words) {
    const span = document.createElement("span");
    span.className = "badge";
    span.dataset.status = status || "";
    span.textContent = (words || STATUS_WORDS)[status] || status || "new";
    return span;
  }
  function when(text) {
    if (!text) return "";
    const date = new Date(text);
    if (Number.isNaN(date.getTime())) return String(text);
    return date.toLocaleString([], { year: "numeric", month: "2-digit", day: "2-digit", hour: "2-digit", minute: "2-digit" });
  }
  function shown(value) {
    if (value === null || value === undefined || value === "") return "(empty)";
    return typeof value === "string" ? value : JSON.stringify(value);
  }
  function has(role) { return Boolean(session.info && session.info.roles.includes(role)); }
  const canEdit = () => has("sonographer") || has("reader");
  function showMessage(id, text) {
    const el = $(id);
    el.textContent = text ? text.charAt(0).toUpperCase() + text.slice(1) : "";
    el.hidden = !text;
  }
  function view(name) {
    for (const section of $all(".view")) section.hidden = section.id !== `view-${name}`;
    for (const a of $all(".views-nav .nav-link")) {
      if (a.getAttribute("href") === `#${name}`) a.setAttribute("aria-current", "page");
      else a.removeAttribute("aria-current");
    }
  }

  // --- sign-in, password, sign-out, idle timeout ----------------------------------------------

  function gate(which, message) {
    $("#app").hidden = true;
    $("#signin").hidden = which !== "signin";
    $("#password-screen").hidden = which !== "password";
    if (which === "signin") {
      showMessage("#signin-message", message);
      $("#signin-password").value = "";
      $("#signin-user").focus();
    } else {
      showMessage("#password-message", message);
      for (const id of ["#password-old", "#password-new", "#password-again"]) $(id).value = "";
      $("#password-old").focus();
    }
  }

  async function signIn(event) {
    event.preventDefault();
    const user = $("#signin-user").value.trim();
    const password = $("#signin-password").value;
    if (!user || !password) { showMessage("#signin-message", "Type your user name and password."); return; }
    const button = $("#signin-button");
    button.disabled = true;
    try {
      const { response, answer } = await call("/api/session", { method: "POST", body: { user, password }, signingIn: true });
      $("#signin-password").value = "";
      if (response.status === 429) {
        const wait = response.headers.get("retry-after");
        showMessage("#signin-message", `Too many attempts from this computer${wait ? `; try again in ${wait} seconds` : "; wait a little"}.`);
        return;
      }
      if (!response.ok) { showMessage("#signin-message", answer.detail || "Not signed in."); return; }
      enter(answer);
    } catch (error) {
      showMessage("#signin-message", `The server did not answer (${error.message}).`);
    } finally {
      button.disabled = false;
    }
  }

  function enter(info) {
    const kept = session.kept && session.kept.user === info.user ? session.kept : null;
    session.kept = null;
    session.info = info;
    if (info.must_change_password) {
      gate("password", "Your password was set by an administrator: choose your own before you start.");
      $("#password-cancel").hidden = true;
      return;
    }
    $("#signin").hidden = true;
    $("#password-screen").hidden = true;
    $("#app").hidden = false;
    $("#who-name").textContent = info.full_name || info.user;
    $("#who-roles").textContent = `(${info.user} · ${info.roles.join(", ")})`;
    $("#nav-users").hidden = !has("admin");
    $("#nav-audit").hidden = !has("admin");
    $("#nav-new").hidden = !canEdit();
    if (has("reader")) list.readers.add(info.user);
    session.idleMs = Math.max(60, Number(info.idle_timeout_seconds) || 900) * 1000;
    session.lastActive = Date.now();
    clearInterval(session.timer);
    session.timer = setInterval(checkIdle, IDLE_CHECK_MS);
    if (canEdit()) editor.loadPhrases();
    if (has("admin")) loadReaders();
    setStatus(`Signed in as ${info.user}.`, "ok");
    route().then(() => {
      if (kept && kept.id && study.id === kept.id && !study.readOnly) {
        // the entries keep the version they started from: a save after someone else's is a conflict
        Object.assign(study, { etag: kept.etag, base: kept.base, version: kept.version });
        editor.populate(kept.data);
        editor.changed();
        setStatus("Your unsaved entries from before the sign-out are back on the page; save to store them.", "warn");
      }
    });
  }

  /** Clear everything a signed-in user saw; keep unsaved entries in memory for the same user. */
  function wipe() {
    clearInterval(session.timer);
    if (session.info && study.id && editor.state.dirty && !study.readOnly && !study.amending) {
      session.kept = { user: session.info.user, id: study.id, data: editor.collect(), etag: study.etag, base: study.base, version: study.version };
    }
    session.info = null;
    editor.analyzeSoon.cancel();
    editor.state.analysisSeq += 1; // an analysis still on its way is not shown
    for (const dialog of $all("dialog")) if (dialog.open) dialog.close();
    for (const body of $all("#views tbody")) body.replaceChildren();
    Object.assign(study, { id: null, etag: null, base: null, version: null, status: null, readOnly: true, answer: null, conflict: null, amending: null, isNew: false });
    editor.populate(editor.blankStudy());
    editor.state.dirty = false;
    editor.showProblems([]);
    $("#lab-conflict").hidden = true;
    $("#results").hidden = true;
    $("#status").textContent = "";
    for (const section of $all(".view")) section.hidden = true;
  }

  function ended(message) {
    if (!session.info) return;
    wipe();
    gate("signin", message);
  }

  async function signOut() {
    try { await send("/api/session", { method: "DELETE" }); } catch (error) { /* signed out here anyway */ }
    ended("Signed out.");
  }

  function checkIdle() {
    if (!session.info) return;
    if (Date.now() - session.lastActive >= session.idleMs) {
      const minutes = Math.round(session.idleMs / 60000);
      send("/api/session", { method: "DELETE" }).catch(() => {});
      ended(`Signed out after ${minutes} minute${minutes === 1 ? "" : "s"} without activity. Unsaved entries come back when you sign in again.`);
    }
  }

  async function changePassword(event) {
    event.preventDefault();
    const old = $("#password-old").value;
    const fresh = $("#password-new").value;
    if (!old || !fresh) { showMessage("#password-message", "Type your current password and a new one."); return; }
    if (fresh !== $("#password-again").value) { showMessage("#password-message", "The new password and its repetition differ."); return; }
    const { response, answer } = await call("/api/session/password", { method: "PUT", body: { old, new: fresh }, signingIn: true });
    if (!response.ok) { showMessage("#password-message", refusal(answer, response)); return; }
    session.info = null;
    wipe();
    gate("signin", "Password changed. Sign in with the new password.");
  }

  // --- worklist -------------------------------------------------------------------------------

  function filters() {
    const query = new URLSearchParams();
    const pairs = [["status", "#filter-status"], ["date_from", "#filter-from"], ["date_to", "#filter-to"], ["reader", "#filter-reader"], ["patient", "#filter-patient"]];
    for (const [name, id] of pairs) {
      const value = $(id).value.trim();
      if (value) query.set(name, value);
    }
    query.set("limit", String(PAGE_SIZE));
    query.set("offset", String(list.offset));
    return query;
  }

  async function loadWorklist() {
    const { response, answer } = await call(`/api/worklist?${filters()}`);
    if (!response.ok) { setStatus(`Worklist not loaded: ${refusal(answer, response)}`, "problem"); return; }
    list.total = answer.total || 0;
    const body = $("#worklist-table tbody");
    body.replaceChildren();
    for (const row of answer.rows || []) {
      for (const name of [row.assigned_reader]) if (name) list.readers.add(name);
      body.appendChild(worklistRow(row));
    }
    refreshReaders();
    $("#worklist-empty").hidden = (answer.rows || []).length > 0;
    const first = list.total ? list.offset + 1 : 0;
    const last = Math.min(list.offset + PAGE_SIZE, list.total);
    $("#worklist-count").textContent = `${list.total} stud${list.total === 1 ? "y" : "ies"}`;
    $("#page-where").textContent = list.total ? `${first}–${last} of ${list.total}` : "";
    $("#page-prev").disabled = list.offset === 0;
    $("#page-next").disabled = last >= list.total;
  }

  function worklistRow(row) {
    const tr = document.createElement("tr");
    tr.dataset.study = row.study_id;
    cell(tr, link(row.study_id, `#study/${encodeURIComponent(row.study_id)}`), true);
    cell(tr, row.patient_id);
    cell(tr, row.study_date);
    const status = document.createElement("span");
    status.className = "status-cell";
    status.appendChild(badge(row.status));
    if (row.awaiting_reader) {
      const mark = document.createElement("span");
      mark.className = "badge awaiting";
      mark.textContent = "awaiting reader";
      status.append(" ", mark);
    }
    cell(tr, status);
    cell(tr, `v${row.version}`);
    cell(tr, `${row.author || "–"} · ${when(row.updated_at)}`);
    cell(tr, assignControl(row));
    return tr;
  }

  function assignControl(row) {
    if (!(has("reader") || has("admin"))) {
      const span = document.createElement("span");
      span.textContent = row.assigned_reader || "–";
      return span;
    }
    const form = document.createElement("form");
    form.className = "assign";
    const input = document.createElement("input");
    input.type = "text";
    input.setAttribute("list", "reader-names");
    input.value = row.assigned_reader || "";
    input.placeholder = "unassigned";
    input.autocomplete = "off";
    input.spellcheck = false;
    input.setAttribute("aria-label", `Reader of ${row.study_id}`);
    const button = document.createElement("button");
    button.type = "submit";
    button.className = "small";
    button.textContent = "Assign";
    form.append(input, button);
    form.addEventListener("submit", async (event) => {
      event.preventDefault();
      const reader = input.value.trim() || null;
      const { response, answer } = await call(studyUrl(row.study_id, "/assignment"), { method: "PUT", body: { reader } });
      if (!response.ok) { setStatus(`Not assigned: ${refusal(answer, response)}`, "problem"); return; }
      setStatus(reader ? `${row.study_id} assigned to ${reader}.` : `${row.study_id} has no reader now.`, "ok");
      if (reader) list.readers.add(reader);
      loadWorklist();
    });
    return form;
  }

  function refreshReaders() {
    const names = $("#reader-names");
    names.replaceChildren();
    for (const name of Array.from(list.readers).sort()) names.appendChild(new Option(name, name));
  }

  async function loadReaders() {
    const { response, answer } = await call("/api/users");
    if (!response.ok) return;
    for (const user of usersOf(answer)) if ((user.roles || []).includes("reader")) list.readers.add(user.name);
    refreshReaders();
  }

  // --- one study ------------------------------------------------------------------------------

  async function openStudy(id) {
    const { response, answer } = await call(studyUrl(id));
    if (!response.ok) { setStatus(`Cannot open ${id}: ${refusal(answer, response)}`, "problem"); return false; }
    study.isNew = false;
    showStudy(answer, response.headers.get("etag") || answer.etag || null);
    setStatus(`Opened ${id}, version ${answer.version}.`, "ok");
    return true;
  }

  function showStudy(answer, etag) {
    const doc = answer.study || {};
    study.answer = answer;
    study.id = (doc.study && doc.study.id) || answer.study_id || study.id;
    study.etag = etag;
    study.base = clone(doc);
    study.version = answer.version;
    study.status = answer.status;
    study.readOnly = Boolean(answer.read_only);
    study.meaning = answer.default_meaning || LAB.meaning;
    study.amending = null;
    study.conflict = null;
    $("#lab-conflict").hidden = true;
    editor.populate(doc);
    editor.state.dirty = false;
    editor.showProblems([]);
    showMeta();
    showContext(answer);
    if (canEdit()) editor.runAnalysis();
    else $("#analysis-state").textContent = "The live analysis is for sonographers and readers.";
  }

  function showMeta() {
    const answer = study.answer || {};
    $("#study-title").textContent = study.isNew ? "New study" : `Study ${study.id}`;
    const status = $("#study-status");
    status.dataset.status = study.status || "";
    status.textContent = VERSION_WORDS[study.status] || study.status || "not saved yet";
    $("#study-awaiting").hidden = !answer.awaiting_reader;
    $("#study-version").textContent = study.version ? `version ${study.version}` : "";
    $("#study-assigned").textContent = answer.assigned_reader ? `reader: ${answer.assigned_reader}` : "";
    const signed = study.readOnly;
    const amending = Boolean(study.amending);
    editor.setReadOnly((signed && !amending) || !canEdit());
    $("#f-study-id").readOnly = !study.isNew; // a stored study keeps its id
    $("#save-button").hidden = signed || !canEdit();
    $("#sign-button").hidden = signed || study.isNew || !has("reader");
    $("#amend-button").hidden = !signed || amending || !has("reader");
    $("#addendum-button").hidden = !signed || amending || !has("reader");
    $("#amend-sign-button").hidden = !amending;
    $("#amend-stop-button").hidden = !amending;
    $("#amend-banner").hidden = !amending;
    $("#amend-reason-shown").textContent = study.amending || "";
    $("#history-link").hidden = study.isNew;
    $("#history-link").href = `#history/${encodeURIComponent(study.id || "")}`;
    const sig = answer.signature;
    $("#signed-banner").hidden = !(signed && sig);
    if (signed && sig) {
      $("#signed-text").textContent = `Signed by ${sig.signer_name || sig.signer} on ${when(sig.signed_at)}: “${sig.meaning}”.${amending ? "" : has("reader") ? " This version is read-only; use Amend or Addendum to change the report." : " This version is read-only."}`;
      $("#signed-pdf").href = pdfUrl(study.id, study.version);
    }
  }

  const pdfUrl = (id, version) => studyUrl(id, `/pdf?version=${encodeURIComponent(version)}`);

  function showContext(answer) {
    const earlier = answer.earlier || [];
    const ul = $("#earlier-list");
    ul.replaceChildren();
    for (const item of earlier) {
      const li = document.createElement("li");
      li.append(link(`${item.study_date || "undated"} · ${item.study_id}`, `#study/${encodeURIComponent(item.study_id)}`), " ", badge(item.status));
      ul.appendChild(li);
    }
    $("#earlier-none").hidden = earlier.length > 0;
    showComparison(answer.comparison || null);
  }

  function showComparison(comparison) {
    $("#comparison-block").hidden = !comparison;
    $("#comparison-none").hidden = Boolean(comparison);
    if (!comparison) return;
    $("#comparison-prior").textContent = `${comparison.prior_study_id}${comparison.prior_date ? ` of ${comparison.prior_date}` : ""}`;
    const body = $("#comparison-wmsi tbody");
    body.replaceChildren();
    const fixed = (v) => (typeof v === "number" ? v.toFixed(2) : "–");
    for (const [stage, pair] of Object.entries(comparison.wmsi || {})) {
      const tr = document.createElement("tr");
      cell(tr, editor.stageTitle(stage), true);
      cell(tr, fixed(pair.prior));
      cell(tr, fixed(pair.current));
      body.appendChild(tr);
    }
    const territories = $("#comparison-territories");
    territories.replaceChildren();
    for (const [name, change] of Object.entries(comparison.territories || {})) {
      const li = document.createElement("li");
      li.textContent = `${name}: ${CHANGE_WORDS[change] || String(change).replace(/_/g, " ")}`;
      li.dataset.change = change;
      territories.appendChild(li);
    }
    const segments = comparison.changed_segments || [];
    $("#comparison-segments").textContent = segments.length
      ? `Changed segments: ${segments.map((s) => `${s.number} (${s.prior_response.replace(/_/g, " ")} → ${s.response.replace(/_/g, " ")})`).join(", ")}`
      : "No segment changed its response.";
  }

  function newStudy() {
    study.isNew = true;
    study.answer = { awaiting_reader: false };
    Object.assign(study, { id: null, etag: null, base: null, version: null, status: null, readOnly: false, amending: null, conflict: null });
    $("#lab-conflict").hidden = true;
    editor.populate(editor.blankStudy());
    editor.state.dirty = false;
    editor.showProblems([]);
    showMeta();
    showContext({});
    $("#results").hidden = true;
    setStatus("New study: enter it, then save.");
  }

  async function save() {
    if (study.readOnly) return false;
    const data = editor.collect();
    if (!(await editor.withImpression(data))) return false;
    const button = $("#save-button");
    button.disabled = true;
    try {
      let result;
      if (study.isNew) {
        result = await call("/api/studies", { method: "POST", body: { study: data } });
      } else {
        result = await call(studyUrl(study.id), { method: "PUT", body: { study: data }, headers: { "if-match": study.etag || "" } });
      }
      const { response, answer } = result;
      if (response.status === 412) { showConflict(answer, data); return false; }
      if (!response.ok) {
        const count = editor.showProblems(answer.problems || []);
        if (count) editor.showRefused(count);
        setStatus(`Not saved: ${refusal(answer, response)}`, "problem");
        return false;
      }
      const id = (data.study && data.study.id) || study.id;
      const etag = response.headers.get("etag") || answer.etag;
      study.isNew = false;
      study.id = id;
      study.etag = etag;
      study.base = clone(data);
      editor.state.dirty = false;
      $("#lab-conflict").hidden = true;
      await refreshMeta(etag);
      const awaiting = study.answer && study.answer.awaiting_reader;
      setStatus(`Saved ${id} as version ${study.version}${awaiting ? ", awaiting a reader" : ""} · ${E.clock()}`, "ok");
      if (location.hash !== `#study/${encodeURIComponent(id)}`) history.replaceState(null, "", `#study/${encodeURIComponent(id)}`);
      return true;
    } finally {
      button.disabled = false;
    }
  }

  /** After a save: the study's status, version and marks as stored, without touching the form. */
  async function refreshMeta(etag) {
    const { response, answer } = await call(studyUrl(study.id));
    if (!response.ok) return;
    if (etag && response.headers.get("etag") && response.headers.get("etag") !== etag) return;
    study.answer = answer;
    study.version = answer.version;
    study.status = answer.status;
    study.etag = response.headers.get("etag") || etag;
    study.base = clone(answer.study);
    showMeta();
    showContext(answer);
  }

  // --- a stale save (412): what they changed, reload theirs or re-apply mine on top --------------

  function showConflict(answer, data) {
    study.conflict = { answer, data };
    const who = answer.changed_by || "someone else";
    $("#lab-conflict-title").textContent = `Not saved: ${who} saved ${study.id} while you were editing`;
    $("#lab-conflict-detail").textContent = `You started from version ${answer.base_version}; version ${answer.current_version} was saved by ${who}${answer.changed_at ? ` at ${when(answer.changed_at)}` : ""}. Field by field:`;
    const body = $("#lab-conflict-table tbody");
    body.replaceChildren();
    for (const change of answer.changes || []) {
      const tr = document.createElement("tr");
      const theirsChanged = JSON.stringify(change.theirs) !== JSON.stringify(change.base);
      const mineChanged = JSON.stringify(change.mine) !== JSON.stringify(change.base);
      tr.dataset.field = change.path;
      if (change.conflict) tr.className = "both";
      cell(tr, change.path, true);
      cell(tr, shown(change.theirs)).classList.toggle("same", !theirsChanged);
      cell(tr, shown(change.mine)).classList.toggle("same", !mineChanged);
      cell(tr, change.conflict ? "both of you (yours is kept on re-apply)" : theirsChanged && mineChanged ? "both of you, the same way" : theirsChanged ? who : mineChanged ? "you" : "–");
      body.appendChild(tr);
    }
    $("#lab-conflict").hidden = false;
    setStatus("Not saved: the study changed since you opened it. Your entries are still on this page.", "problem");
    $("#conflict-reapply").focus();
  }

  function leaves(value, prefix, out) {
    if (isObject(value)) {
      for (const [key, item] of Object.entries(value)) leaves(item, prefix ? `${prefix}.${key}` : key, out);
    } else if (prefix) {
      out.set(prefix, value);
    }
    return out;
  }
  function put(obj, path, value) {
    const keys = path.split(".");
    let cur = obj;
    for (const key of keys.slice(0, -1)) {
      if (!isObject(cur[key])) cur[key] = {};
      cur = cur[key];
    }
    cur[keys[keys.length - 1]] = value;
  }
  function drop(obj, path) {
    const keys = path.split(".");
    let cur = obj;
    for (const key of keys.slice(0, -1)) {
      if (!isObject(cur[key])) return;
      cur = cur[key];
    }
    delete cur[keys[keys.length - 1]];
  }

  /** The stored study with every field I changed since my base put back (mine wins where we both
   *  changed it); scores compared segment by segment whatever form they were typed in. */
  function mineOnTop(base, mine, current) {
    const b = leaves(editor.normalise(base), "", new Map());
    const m = leaves(editor.normalise(mine), "", new Map());
    const merged = editor.normalise(current);
    const same = (x, y) => JSON.stringify(x) === JSON.stringify(y);
    for (const path of new Set([...b.keys(), ...m.keys()])) {
      if (same(b.get(path), m.get(path))) continue;
      if (m.has(path)) put(merged, path, clone(m.get(path)));
      else drop(merged, path);
    }
    return E.prune(merged);
  }

  /** The study document of a conflict's ``current`` (the document itself, or an opened study). */
  function storedStudy(current) {
    return isObject(current) && "version" in current && isObject(current.study) && !("schema_version" in current) ? current.study : current;
  }

  async function reapplyMine() {
    const conflict = study.conflict;
    if (!conflict) return;
    const { answer, data } = conflict;
    const current = storedStudy(answer.current);
    const merged = mineOnTop(study.base, data, current);
    study.base = clone(current);
    study.etag = answer.etag;
    study.version = answer.current_version;
    study.conflict = null;
    $("#lab-conflict").hidden = true;
    editor.populate(merged);
    editor.changed();
    if (await save()) setStatus(`Saved ${study.id} as version ${study.version}: your changes on top of ${answer.changed_by || "the other"}'s · ${E.clock()}`, "ok");
  }

  async function reloadTheirs() {
    study.conflict = null;
    await openStudy(study.id);
    setStatus(`Reloaded ${study.id} as stored now (version ${study.version}); your changes were dropped.`, "ok");
  }

  // --- signing, amendments, addenda -------------------------------------------------------------

  /** A window opened at the click (so no pop-up blocker stops it), pointed at the PDF once signed. */
  function pdfWindow() {
    const win = window.open("", "_blank");
    if (win) {
      try { win.opener = null; win.document.title = "Signing…"; win.document.body.textContent = "Signing the report…"; } catch (error) { /* another origin */ }
    }
    return win;
  }

  async function startSigning() {
    if (!study.amending && editor.state.dirty && !(await save())) return;
    $("#sign-title").textContent = study.amending ? "Sign the amendment" : "Sign the report";
    $("#sign-what").textContent = study.amending
      ? `You sign an amendment of ${study.id} version ${study.version}. Reason: ${study.amending}`
      : `You sign ${study.id}, version ${study.version}, as its final report.`;
    $("#sign-meaning").textContent = study.meaning || LAB.meaning;
    $("#sign-password").value = "";
    showMessage("#sign-error", "");
    $("#sign-dialog").showModal();
    $("#sign-password").focus();
  }

  async function sign(event) {
    event.preventDefault();
    const password = $("#sign-password").value;
    if (!password) { showMessage("#sign-error", "Type your password to sign."); return; }
    const win = pdfWindow();
    const button = $("#sign-confirm");
    button.disabled = true;
    let done = false;
    try {
      let result;
      if (study.amending) {
        const data = editor.collect();
        if (!(await editor.withImpression(data))) return;
        result = await call(studyUrl(study.id, "/amend"), { method: "POST", body: { study: data, reason: study.amending, password, meaning: study.meaning || LAB.meaning }, headers: { "if-match": study.etag || "" } });
      } else {
        result = await call(studyUrl(study.id, "/sign"), { method: "POST", body: { password, meaning: study.meaning || LAB.meaning }, headers: { "if-match": study.etag || "" } });
      }
      const { response, answer } = result;
      $("#sign-password").value = "";
      if (!response.ok) {
        if (!session.info) return;
        showMessage("#sign-error", response.status === 401 ? "Not signed: the password is not right. Repeated wrong passwords lock the account." : refusal(answer, response));
        editor.showProblems(answer.problems || []);
        return;
      }
      done = true;
      $("#sign-dialog").close();
      await signedThen(answer, win);
    } finally {
      button.disabled = false;
      if (!done && win) win.close();
    }
  }

  async function signedThen(answer, win) {
    const url = answer.pdf || pdfUrl(study.id, answer.version);
    if (win) win.location.href = url;
    else window.open(url, "_blank", "noopener");
    const what = study.amending ? "Amendment signed" : "Signed";
    study.amending = null;
    await openStudy(study.id);
    setStatus(`${what}: ${study.id} version ${answer.version}; the PDF opens in a new tab.`, "ok");
  }

  function startAmend() {
    $("#amend-reason").value = "";
    showMessage("#amend-error", "");
    $("#amend-dialog").showModal();
    $("#amend-reason").focus();
  }

  function beginAmending(event) {
    event.preventDefault();
    const reason = $("#amend-reason").value.trim();
    if (!reason) { showMessage("#amend-error", "Say why the report is amended; the reason is printed on it."); return; }
    $("#amend-dialog").close();
    study.amending = reason;
    showMeta();
    setStatus("Amending: change what needs changing, then sign the amendment.", "warn");
  }

  async function stopAmending() {
    study.amending = null;
    await openStudy(study.id);
  }

  function startAddendum() {
    $("#addendum-text").value = "";
    $("#addendum-password").value = "";
    $("#addendum-meaning").textContent = study.meaning || LAB.meaning;
    showMessage("#addendum-error", "");
    $("#addendum-dialog").showModal();
    $("#addendum-text").focus();
  }

  async function addAddendum(event) {
    event.preventDefault();
    const text = $("#addendum-text").value.trim();
    const password = $("#addendum-password").value;
    if (!text || !password) { showMessage("#addendum-error", "Write the addendum and type your password."); return; }
    const win = pdfWindow();
    let done = false;
    try {
      const { response, answer } = await call(studyUrl(study.id, "/addendum"), { method: "POST", body: { text, password }, headers: { "if-match": study.etag || "" } });
      $("#addendum-password").value = "";
      if (!response.ok) {
        if (!session.info) return;
        showMessage("#addendum-error", response.status === 401 ? "Not signed: the password is not right." : refusal(answer, response));
        return;
      }
      done = true;
      $("#addendum-dialog").close();
      await signedThen(answer, win);
    } finally {
      if (!done && win) win.close();
    }
  }

  // --- history and audit ----------------------------------------------------------------------

  async function showHistory(id) {
    const { response, answer } = await call(studyUrl(id, "/history"));
    if (!response.ok) { setStatus(`No history of ${id}: ${refusal(answer, response)}`, "problem"); return; }
    $("#history-title").textContent = `History of ${id}${answer.patient_id ? ` (patient ${answer.patient_id})` : ""}`;
    $("#history-back").href = `#study/${encodeURIComponent(id)}`;
    const versions = $("#versions-table tbody");
    versions.replaceChildren();
    for (const v of answer.versions || []) {
      const tr = document.createElement("tr");
      const sig = v.signature;
      cell(tr, `v${v.version}`, true);
      cell(tr, badge(v.status, VERSION_WORDS));
      cell(tr, v.author);
      cell(tr, when(v.created_at));
      cell(tr, v.reason);
      cell(tr, sig ? `${sig.signer_name || sig.signer}, ${when(sig.signed_at)}: ${sig.meaning}` : "");
      cell(tr, sig ? link("PDF", pdfUrl(id, v.version), true) : "");
      versions.appendChild(tr);
    }
    const events = $("#events-table tbody");
    events.replaceChildren();
    for (const e of answer.events || []) events.appendChild(eventRow(e, false));
    setStatus(`History of ${id}: ${(answer.versions || []).length} versions, ${(answer.events || []).length} events.`, "ok");
  }

  function eventRow(e, withStudy) {
    const tr = document.createElement("tr");
    tr.dataset.event = e.action;
    cell(tr, e.seq, true);
    cell(tr, when(e.at));
    cell(tr, e.actor);
    cell(tr, String(e.action || "").replace(/_/g, " "));
    if (withStudy) cell(tr, e.study_id ? link(e.study_id, `#study/${encodeURIComponent(e.study_id)}`) : "");
    cell(tr, e.version ? `v${e.version}` : "");
    cell(tr, e.origin);
    return tr;
  }

  async function loadAudit() {
    const { response, answer } = await call(`/api/audit?after=${audit.after}&limit=${AUDIT_PAGE}`);
    if (!response.ok) { setStatus(`Audit trail not loaded: ${refusal(answer, response)}`, "problem"); return; }
    const events = Array.isArray(answer) ? answer : answer.events || answer.rows || [];
    const body = $("#audit-table tbody");
    body.replaceChildren();
    for (const e of events) body.appendChild(eventRow(e, true));
    audit.last = answer.next_after || (events.length ? events[events.length - 1].seq : audit.after);
    $("#audit-next").disabled = answer.next_after === null || events.length < AUDIT_PAGE;
  }

  // --- users (admin) --------------------------------------------------------------------------

  function usersOf(answer) { return Array.isArray(answer) ? answer : answer.users || []; }

  async function loadUsers() {
    const { response, answer } = await call("/api/users");
    if (!response.ok) { setStatus(`Users not loaded: ${refusal(answer, response)}`, "problem"); return; }
    const body = $("#users-table tbody");
    body.replaceChildren();
    for (const user of usersOf(answer)) {
      const tr = document.createElement("tr");
      tr.dataset.user = user.name;
      cell(tr, user.name, true);
      cell(tr, user.full_name);
      cell(tr, (user.roles || []).join(", "));
      cell(tr, user.locked ? `locked${user.locked_until ? ` until ${when(user.locked_until)}` : ""}` : "active");
      if (user.locked) {
        const button = document.createElement("button");
        button.type = "button";
        button.className = "small";
        button.textContent = "Unlock";
        button.addEventListener("click", async () => {
          const { response: r, answer: a } = await call(`/api/users/${encodeURIComponent(user.name)}/unlock`, { method: "POST" });
          if (!r.ok) { setStatus(`Not unlocked: ${refusal(a, r)}`, "problem"); return; }
          setStatus(`${user.name} unlocked.`, "ok");
          loadUsers();
        });
        cell(tr, button);
      } else {
        cell(tr, "");
      }
      body.appendChild(tr);
    }
  }

  async function addUser(event) {
    event.preventDefault();
    const roles = $all("#user-roles input:checked").map((box) => box.value);
    const body = { name: $("#user-name").value.trim(), full_name: $("#user-full").value.trim(), roles, password: $("#user-password").value };
    if (!body.name || !body.full_name || !roles.length || !body.password) {
      showMessage("#user-form-message", "Give the user name, full name, at least one role and a first password.");
      return;
    }
    const { response, answer } = await call("/api/users", { method: "POST", body });
    if (!response.ok) { showMessage("#user-form-message", refusal(answer, response)); return; }
    showMessage("#user-form-message", "");
    $("#user-form").reset();
    setStatus(`User ${body.name} added; they choose their own password at first sign-in.`, "ok");
    loadUsers();
  }

  // --- views by address (#worklist, #study/ID, #history/ID, #new, #users, #audit) -----------------

  async function route() {
    if (!session.info) return;
    const [name, rawId] = location.hash.replace(/^#/, "").split("/");
    const id = rawId ? decodeURIComponent(rawId) : "";
    if (name === "study" && id) {
      view("study");
      if (study.id !== id || study.isNew) await openStudy(id);
    } else if (name === "new" && canEdit()) {
      view("study");
      newStudy();
    } else if (name === "history" && id) {
      view("history");
      await showHistory(id);
    } else if (name === "users" && has("admin")) {
      view("users");
      await loadUsers();
    } else if (name === "audit" && has("admin")) {
      view("audit");
      audit.after = 0;
      await loadAudit();
    } else {
      view("worklist");
      if (location.hash !== "#worklist") history.replaceState(null, "", "#worklist");
      await loadWorklist();
    }
  }

  function hashChanged() {
    const onStudy = !$("#view-study").hidden;
    if (onStudy && editor.state.dirty && (!study.readOnly || study.amending) && !window.confirm("Leave this study without saving your changes?")) {
      history.replaceState(null, "", study.id ? `#study/${encodeURIComponent(study.id)}` : "#new");
      return;
    }
    if (onStudy && location.hash !== `#study/${encodeURIComponent(study.id || "")}`) {
      editor.state.dirty = false;
      study.id = null; // opened afresh when come back to
    }
    setStatus("");
    route();
  }

  // --- start ----------------------------------------------------------------------------------

  const editor = E.create({
    fetch: send,
    loadPhrases: false,
    onResult: (result) => { if (result.record && "comparison" in result.record) showComparison(result.record.comparison); },
  });

  function wire() {
    $("#signin-form").addEventListener("submit", signIn);
    $("#password-form").addEventListener("submit", changePassword);
    $("#password-button").addEventListener("click", () => { $("#password-cancel").hidden = false; gate("password", ""); });
    $("#password-cancel").addEventListener("click", () => enter(session.info));
    $("#signout-button").addEventListener("click", signOut);
    $("#worklist-filters").addEventListener("submit", (event) => { event.preventDefault(); list.offset = 0; loadWorklist(); });
    $("#filter-clear").addEventListener("click", () => { $("#worklist-filters").reset(); list.offset = 0; loadWorklist(); });
    $("#page-prev").addEventListener("click", () => { list.offset = Math.max(0, list.offset - PAGE_SIZE); loadWorklist(); });
    $("#page-next").addEventListener("click", () => { list.offset += PAGE_SIZE; loadWorklist(); });
    $("#save-button").addEventListener("click", () => save());
    $("#sign-button").addEventListener("click", startSigning);
    $("#amend-sign-button").addEventListener("click", startSigning);
    $("#sign-form").addEventListener("submit", sign);
    $("#sign-cancel").addEventListener("click", () => $("#sign-dialog").close());
    $("#amend-button").addEventListener("click", startAmend);
    $("#amend-form").addEventListener("submit", beginAmending);
    $("#amend-cancel").addEventListener("click", () => $("#amend-dialog").close());
    $("#amend-stop-button").addEventListener("click", stopAmending);
    $("#addendum-button").addEventListener("click", startAddendum);
    $("#addendum-form").addEventListener("submit", addAddendum);
    $("#addendum-cancel").addEventListener("click", () => $("#addendum-dialog").close());
    $("#conflict-reapply").addEventListener("click", reapplyMine);
    $("#conflict-reload").addEventListener("click", reloadTheirs);
    $("#conflict-close").addEventListener("click", () => { $("#lab-conflict").hidden = true; });
    $("#user-form").addEventListener("submit", addUser);
    $("#audit-first").addEventListener("click", () => { audit.after = 0; loadAudit(); });
    $("#audit-next").addEventListener("click", () => { audit.after = audit.last || 0; loadAudit(); });
    window.addEventListener("hashchange", hashChanged);
    for (const type of ["pointerdown", "keydown", "input", "wheel"]) {
      document.addEventListener(type, () => { session.lastActive = Date.now(); }, { passive: true, capture: true });
    }
    window.addEventListener("beforeunload", (event) => {
      if (session.info && editor.state.dirty && !study.readOnly) { event.preventDefault(); event.returnValue = ""; }
    });
  }

  async function start() {
    wire();
    // the store sets a version's report status (preliminary until signed): not a field to edit here
    const reportStatus = $("#f-study-report_status");
    if (reportStatus) reportStatus.closest(".field").hidden = true;
    let response;
    try {
      response = await window.fetch("/api/session", { credentials: "same-origin" });
    } catch (error) {
      gate("signin", `The server did not answer (${error.message}).`);
      return;
    }
    if (response.ok) enter(await response.json());
    else gate("signin", "");
  }

  start();
})();
