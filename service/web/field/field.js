// The field app's screens: sign-in, to do (assignments), re-check entry, outbox.
// It shows only what is assigned to the tablet, never a facility's standing.
import { Sender, cache, newRecordId, outbox } from "./outbox.js";

const KEY = "seqaudit.field.key";
const $ = (id) => document.getElementById(id);
const state = { result: null, assignments: null, assignmentsAt: null, editing: null, seq: 0 };

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (k === "class") node.className = v;
    else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v);
  }
  for (const c of children) node.append(c);
  return node;
}

const key = () => localStorage.getItem(KEY);

const sender = new Sender({
  key,
  onChange: (news) => { renderOutbox(); if (news && news.sent) refreshAssignments(); },
  onAuthFailed: (why) => showSignIn(`The service refused this tablet's key (${why}). Sign in again; saved re-checks are kept.`),
});

// -- sign-in ---------------------------------------------------------------------------------
function showSignIn(message) {
  $("signin-view").hidden = false;
  $("work-view").hidden = true;
  $("signout").hidden = true;
  const err = $("signin-error");
  err.hidden = !message;
  err.textContent = message || "";
  $("key").focus();
}

function showWork() {
  $("signin-view").hidden = true;
  $("work-view").hidden = false;
  $("signout").hidden = false;
}

$("signin-form").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const candidate = $("key").value.trim();
  if (!candidate) { showSignIn("Type the field key you were given."); return; }
  let resp;
  try {
    resp = await fetch("/v1/assignments", { headers: { Authorization: `Bearer ${candidate}` }, cache: "no-store" });
  } catch (err) {
    showSignIn("No network: sign in once while the network is up.");
    return;
  }
  if (!resp.ok) {
    const body = await resp.json().catch(() => ({}));
    showSignIn(body.detail || `The service refused this key (${resp.status}).`);
    return;
  }
  localStorage.setItem(KEY, candidate);
  $("key").value = "";
  await storeAssignments(await resp.json());
  showWork();
  renderTodo();
  renderOutbox();
  sender.flush();
});

$("signout").addEventListener("click", async () => {
  const pending = (await outbox.all()).length;
  if (pending && !confirm(`${pending} saved re-check(s) have not reached the service yet. They stay on this tablet and are sent after the next sign-in. Sign out?`)) return;
  localStorage.removeItem(KEY);
  showSignIn("Signed out.");
});

// -- assignments -----------------------------------------------------------------------------
async function storeAssignments(body) {
  state.assignments = body.items || [];
  state.assignmentsAt = new Date().toISOString();
  await cache.put("assignments", state.assignments);
}

async function refreshAssignments() {
  if (!key()) return;
  try {
    const resp = await fetch("/v1/assignments", { headers: { Authorization: `Bearer ${key()}` }, cache: "no-store" });
    if (resp.status === 401 || resp.status === 403) { showSignIn("The service no longer accepts this tablet's key. Sign in again; saved re-checks are kept."); return; }
    if (resp.ok) await storeAssignments(await resp.json());
  } catch (err) { /* offline: keep the cached list */ }
  renderTodo();
}

async function renderTodo() {
  const box = $("todo");
  box.replaceChildren();
  const items = state.assignments || [];
  const saved = new Set((await outbox.all()).filter((e) => e.state !== "refused")
    .map((e) => `${e.facility_id}\u0000${e.unit_ref || ""}`));
  let count = 0;
  const facilities = $("facility-list");
  facilities.replaceChildren(...items.map((f) => el("option", { value: f.facility_id })));
  for (const f of items) {
    const units = f.units.filter((u) => !saved.has(`${f.facility_id}\u0000${u.unit_ref}`));
    if (!units.length) continue;
    count += units.length;
    const list = el("ol", { class: "units" });
    for (const u of units) {
      list.append(el("li", {},
        el("span", { class: "unit" }, u.unit_ref),
        el("button", { type: "button", class: "pick", "aria-label": `Re-check ${u.unit_ref} at ${f.facility_id}`,
                       onclick: () => pick(f.facility_id, u.unit_ref) }, "Re-check")));
    }
    box.append(el("div", { class: "facility" }, el("h3", {}, f.facility_id), list));
  }
  const when = state.assignmentsAt ? ` (list of ${new Date(state.assignmentsAt).toLocaleString()})` : "";
  $("todo-status").textContent = count
    ? `${count} unit(s) to re-check, in the order drawn${when}.`
    : `Nothing assigned to re-check${when}.`;
  fillUnits();
}

function fillUnits() {
  const fid = $("facility").value.trim();
  const f = (state.assignments || []).find((x) => x.facility_id === fid);
  $("unit-list").replaceChildren(...(f ? f.units : []).map((u) => el("option", { value: u.unit_ref })));
}
$("facility").addEventListener("input", fillUnits);

function pick(fid, unitRef) {
  $("facility").value = fid;
  $("unit").value = unitRef;
  fillUnits();
  $("ok").focus();
}

// -- entry -----------------------------------------------------------------------------------
function setResult(value) {
  state.result = value;
  $("ok").setAttribute("aria-pressed", String(value === 0));
  $("bad").setAttribute("aria-pressed", String(value === 1));
}
$("ok").addEventListener("click", () => setResult(0));
$("bad").addEventListener("click", () => setResult(1));

$("entry").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const err = $("entry-error");
  const facility = $("facility").value.trim();
  const unit = $("unit").value.trim();
  const note = $("note").value.trim();
  const problems = [];
  if (!facility) problems.push("Facility is empty: type or pick the facility.");
  if (state.result === null) problems.push("Choose a result: Conforming or Nonconforming.");
  if (problems.length) {
    err.hidden = false;
    err.textContent = problems.join(" ");
    return;
  }
  err.hidden = true;
  const entry = {
    record_id: newRecordId(),          // made once, here: every retry carries this id
    facility_id: facility, unit_ref: unit || null, nonconforming: state.result,
    note: note || null, observed_at: new Date().toISOString().replace(/\.\d{3}Z$/, "Z"),
    saved_at: new Date().toISOString(), n: state.seq++, state: "waiting",
  };
  await outbox.put(entry);
  if (state.editing) { await outbox.remove(state.editing); state.editing = null; }
  $("unit").value = "";
  $("note").value = "";
  setResult(null);
  await renderTodo();
  await renderOutbox();
  // said once the outbox shows the entry, so "Saved" and an "Empty" outbox never show together
  $("entry-status").textContent = `Saved ${unit || "a unit"} at ${facility}; it is sent when the network allows.`;
  sender.flush();
});

// -- outbox ----------------------------------------------------------------------------------
const WORDS = { waiting: "Waiting to send", sending: "Sent, waiting for the answer", refused: "Refused" };

async function renderOutbox() {
  const entries = await outbox.all();
  const list = $("outbox");
  list.replaceChildren(...entries.map((e) => {
    const what = `${e.unit_ref || "(no unit)"} at ${e.facility_id}: ${e.nonconforming ? "nonconforming" : "conforming"}`;
    const item = el("li", { class: `entry ${e.state}` },
      el("span", { class: "what" }, what),
      el("span", { class: "state" }, WORDS[e.state] || e.state));
    if (e.state === "refused") {
      item.append(el("p", { class: "reason" }, `Reason: ${e.reason}`),
        el("div", { class: "actions" },
          el("button", { type: "button", class: "secondary", "aria-label": `Correct ${e.unit_ref || "entry"} at ${e.facility_id}`,
                         onclick: () => correct(e) }, "Correct"),
          el("button", { type: "button", class: "danger", "aria-label": `Discard ${e.unit_ref || "entry"} at ${e.facility_id}`,
                         onclick: () => discard(e) }, "Discard")));
    }
    return item;
  }));
  const waiting = entries.filter((e) => e.state !== "refused").length;
  const refused = entries.length - waiting;
  let text = waiting || refused
    ? `${waiting} waiting, ${refused} refused.`
    : "Empty: every saved re-check has reached the service.";
  if (sender.lastError && waiting) {
    const inS = sender.nextTryAt ? Math.max(0, Math.round((sender.nextTryAt - Date.now()) / 1000)) : null;
    text += ` Last try: ${sender.lastError}.` + (inS !== null ? ` Next try in about ${inS} s.` : "");
  }
  $("outbox-status").textContent = text;
}

function correct(e) {
  state.editing = e.record_id;
  $("facility").value = e.facility_id;
  $("unit").value = e.unit_ref || "";
  $("note").value = e.note || "";
  setResult(e.nonconforming);
  fillUnits();
  $("entry-status").textContent = "Correct the entry and save it; it is sent as a new record.";
  $("facility").focus();
}

async function discard(e) {
  if (!confirm(`Discard the re-check of ${e.unit_ref || "a unit"} at ${e.facility_id}? It will not be sent.`)) return;
  await outbox.remove(e.record_id);
  await renderOutbox();
  await renderTodo();
}

$("send").addEventListener("click", () => sender.flush());

// -- network ---------------------------------------------------------------------------------
function showNet() {
  $("net").textContent = navigator.onLine ? "Online" : "Offline: re-checks are saved on this tablet";
  $("net").className = navigator.onLine ? "net online" : "net offline";
}
window.addEventListener("online", () => { showNet(); sender.flush(); refreshAssignments(); });
window.addEventListener("offline", showNet);
setInterval(() => { if (navigator.onLine) { sender.flush(); refreshAssignments(); } }, 60000);
setInterval(renderOutbox, 5000);

// -- start -----------------------------------------------------------------------------------
async function start() {
  showNet();
  if ("serviceWorker" in navigator) {
    navigator.serviceWorker.register("/field/sw.js", { scope: "/field" }).catch(() => {});
  }
  state.seq = (await outbox.all()).length;
  const cached = await cache.get("assignments");
  if (cached) { state.assignments = cached.value; state.assignmentsAt = cached.at; }
  if (!key()) { showSignIn(); renderOutbox(); return; }
  showWork();
  await renderTodo();
  await renderOutbox();
  sender.flush();
  refreshAssignments();
}
start();
