// The tablet's outbox and cache in IndexedDB, and the sender that empties the outbox.
//
// A saved re-check is an entry keyed by its record id (made on the device when it is saved),
// so every retry carries the same id and the service counts it once. An entry leaves the
// outbox only when the service has answered "accepted" or "duplicate" for it; a refused
// entry stays, with the service's reason, until the inspector corrects or discards it.

const DB_NAME = "seqaudit-field";
const BATCH = 200;                 // records per request; the service takes up to its batch cap
const MAX_BACKOFF_MS = 30000;

function request(req) {
  return new Promise((resolve, reject) => {
    req.onsuccess = () => resolve(req.result);
    req.onerror = () => reject(req.error);
  });
}

let dbPromise = null;
export function openDb() {
  if (!dbPromise) {
    const req = indexedDB.open(DB_NAME, 1);
    req.onupgradeneeded = () => {
      const db = req.result;
      db.createObjectStore("outbox", { keyPath: "record_id" });
      db.createObjectStore("cache", { keyPath: "name" });
    };
    dbPromise = request(req);
  }
  return dbPromise;
}

async function tx(storeName, mode, fn) {
  const db = await openDb();
  return new Promise((resolve, reject) => {
    const t = db.transaction(storeName, mode);
    const result = fn(t.objectStore(storeName));
    t.oncomplete = () => resolve(result instanceof IDBRequest ? result.result : result);
    t.onerror = () => reject(t.error);
    t.onabort = () => reject(t.error);
  });
}

export const outbox = {
  all: () => tx("outbox", "readonly", (s) => s.getAll())
    .then((rows) => rows.sort((a, b) => a.saved_at.localeCompare(b.saved_at) || a.n - b.n)),
  put: (entry) => tx("outbox", "readwrite", (s) => s.put(entry)),
  remove: (id) => tx("outbox", "readwrite", (s) => s.delete(id)),
  update: async (ids, change) => {
    const db = await openDb();
    return new Promise((resolve, reject) => {
      const t = db.transaction("outbox", "readwrite");
      const s = t.objectStore("outbox");
      for (const id of ids) {
        const get = s.get(id);
        get.onsuccess = () => { if (get.result) s.put(change(get.result)); };
      }
      t.oncomplete = () => resolve();
      t.onerror = () => reject(t.error);
    });
  },
};

export const cache = {
  get: (name) => tx("cache", "readonly", (s) => s.get(name)),
  put: (name, value) => tx("cache", "readwrite", (s) => s.put({ name, value, at: new Date().toISOString() })),
};

// A version-4 UUID from the platform's random source (works without a secure context too).
// A record id: a UUID of version 7 (RFC 9562, section 5.7). Its first 48 bits are the Unix
// time in milliseconds, so ids made later sort later and each new record lands at the end of
// the service's index of record ids; a random (version 4) id lands on a page of that index of
// its own, which costs about twice as much per record once a million records are stored. The
// other 74 bits are random, so two tablets saving in the same millisecond still differ.
export function newRecordId(now = Date.now()) {
  const b = crypto.getRandomValues(new Uint8Array(16));
  let t = Math.floor(now);
  for (let i = 5; i >= 0; i -= 1) {
    b[i] = t % 256;
    t = Math.floor(t / 256);
  }
  b[6] = (b[6] & 0x0f) | 0x70;
  b[8] = (b[8] & 0x3f) | 0x80;
  const h = Array.from(b, (x) => x.toString(16).padStart(2, "0")).join("");
  return `${h.slice(0, 8)}-${h.slice(8, 12)}-${h.slice(12, 16)}-${h.slice(16, 20)}-${h.slice(20)}`;
}

// Words for a refused record, from the service's per-record answer.
export function reasonOf(result) {
  const errors = result.errors || [];
  const words = errors.map((e) => {
    // the batch position means nothing to the inspector: name the field alone
    const field = (e.field || (Array.isArray(e.loc) ? e.loc.filter((p) => p !== "body").join(".") : ""))
      .replace(/^records\.\d+\./, "");
    const msg = e.detail || e.msg || e.message || "";
    return field && !msg.includes(field) ? `${field}: ${msg}` : msg;
  }).filter(Boolean);
  if (words.length) return words.join("; ");
  if (result.status === "conflict") return "this record id was already used for a different record";
  return `refused (${result.status})`;
}

// The sender: one flush at a time; backs off after network or server failures.
export class Sender {
  constructor({ key, onChange, onAuthFailed }) {
    this.key = key;                 // () => the bearer key or null
    this.onChange = onChange;       // (summary) => void, after every state change
    this.onAuthFailed = onAuthFailed;
    this.busy = false;
    this.batch = BATCH;
    this.failures = 0;
    this.timer = null;
    this.lastError = null;
    this.nextTryAt = null;
  }

  schedule(ms) {
    clearTimeout(this.timer);
    this.nextTryAt = Date.now() + ms;
    this.timer = setTimeout(() => this.flush(), ms);
  }

  // Send every waiting entry, batch by batch. Returns when the outbox holds nothing to send
  // or after a failure (then a retry is scheduled with exponential backoff).
  async flush() {
    if (this.busy || !this.key()) return;
    this.busy = true;
    clearTimeout(this.timer);
    this.nextTryAt = null;
    try {
      // entries left "sending" by an interrupted page are waiting again
      for (;;) {
        const waiting = (await outbox.all()).filter((e) => e.state !== "refused").slice(0, this.batch);
        if (!waiting.length) { this.failures = 0; this.lastError = null; break; }
        const ids = waiting.map((e) => e.record_id);
        await outbox.update(ids, (e) => ({ ...e, state: "sending" }));
        this.onChange();
        let resp, body;
        try {
          resp = await fetch("/v1/records", {
            method: "POST",
            headers: { "Content-Type": "application/json", "Authorization": `Bearer ${this.key()}` },
            body: JSON.stringify({ records: waiting.map(toRecord) }),
            cache: "no-store",
          });
          body = await resp.json().catch(() => null);
        } catch (err) {
          await this.fail(ids, "no network: the entries wait and are sent when it is back");
          return;
        }
        if (resp.status === 401 || resp.status === 403) {
          await outbox.update(ids, (e) => ({ ...e, state: "waiting" }));
          this.lastError = (body && body.detail) || "the service refused this tablet's key";
          this.onAuthFailed(this.lastError);
          return;
        }
        if (resp.status === 413 && this.batch > 1) {        // the service takes smaller batches
          this.batch = Math.max(1, Math.floor(this.batch / 2));
          await outbox.update(ids, (e) => ({ ...e, state: "waiting" }));
          continue;
        }
        if (resp.status >= 400 && resp.status < 500 && resp.status !== 429 && !(body && Array.isArray(body.results))) {
          // the request as a whole was refused: keep the entries, shown, for correction
          const why = (body && body.detail) || `refused by the service (${resp.status})`;
          await outbox.update(ids, (e) => ({ ...e, state: "refused", reason: why }));
          continue;
        }
        if (!resp.ok || !body || !Array.isArray(body.results)) {
          const retryAfter = Number(resp.headers.get("Retry-After")) * 1000 || 0;
          await this.fail(ids, `the service answered ${resp.status}${body && body.detail ? `: ${body.detail}` : ""}`, retryAfter);
          return;
        }
        const byIndex = new Map(body.results.map((r) => [r.index, r]));
        const done = [], refused = new Map();
        waiting.forEach((e, i) => {
          const r = byIndex.get(i);
          if (!r) return;                               // not answered: stays waiting
          if (r.status === "accepted" || r.status === "duplicate") done.push(e.record_id);
          else refused.set(e.record_id, reasonOf(r));
        });
        for (const id of done) await outbox.remove(id);
        await outbox.update([...refused.keys()], (e) => ({ ...e, state: "refused", reason: refused.get(e.record_id) }));
        const unanswered = ids.filter((id) => !done.includes(id) && !refused.has(id));
        await outbox.update(unanswered, (e) => ({ ...e, state: "waiting" }));
        this.failures = 0;
        this.lastError = null;
        this.onChange({ sent: done.length, refused: refused.size });
        if (unanswered.length) { this.schedule(2000); return; }
      }
    } finally {
      this.busy = false;
      this.onChange();
    }
  }

  async fail(ids, message, atLeastMs = 0) {
    await outbox.update(ids, (e) => ({ ...e, state: "waiting" }));
    this.failures += 1;
    this.lastError = message;
    const backoff = Math.min(MAX_BACKOFF_MS, 1000 * 2 ** Math.min(this.failures, 5));
    this.schedule(Math.max(atLeastMs, backoff * (0.75 + Math.random() * 0.5)));
  }
}

function toRecord(e) {
  const r = { record_id: e.record_id, facility_id: e.facility_id, observed_at: e.observed_at,
              units: 1, nonconforming: e.nonconforming };
  if (e.unit_ref) r.unit_ref = e.unit_ref;
  if (e.note) r.note = e.note;
  return r;
}
