// Service worker of the field app: keeps the app shell so /field opens with no network.
// Only the shell's own GET requests are answered here; API calls go to the network untouched.
const CACHE = "__CACHE__";
const SHELL = [__SHELL__];

self.addEventListener("install", (event) => {
  event.waitUntil(caches.open(CACHE).then((c) => c.addAll(SHELL)).then(() => self.skipWaiting()));
});

self.addEventListener("activate", (event) => {
  event.waitUntil(
    caches.keys()
      .then((names) => Promise.all(names.filter((n) => n.startsWith("seqaudit-field-") && n !== CACHE)
        .map((n) => caches.delete(n))))
      .then(() => self.clients.claim()));
});

self.addEventListener("fetch", (event) => {
  const req = event.request;
  if (req.method !== "GET") return;
  const url = new URL(req.url);
  if (url.origin !== self.location.origin || !SHELL.includes(url.pathname)) return;
  // Network first, so an online tablet always runs the current release; the cache when
  // the network is down.
  event.respondWith(
    fetch(req).then((resp) => {
      if (resp.ok) {
        const copy = resp.clone();
        caches.open(CACHE).then((c) => c.put(url.pathname, copy));
      }
      return resp;
    }).catch(() => caches.match(url.pathname).then((hit) => hit || Response.error())));
});
