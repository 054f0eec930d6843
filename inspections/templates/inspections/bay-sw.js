/* fleetsvc bay service worker: keeps the bay pages and their static files readable offline.
   Network first; a copy of each good answer is kept so a reload without a connection still shows
   the page (the draft itself lives in localStorage / IndexedDB, never in this cache). POSTs are
   never touched: a submit that cannot go out is queued by bay.js, not here. */
const CACHE = "fleetsvc-bay-v1";

self.addEventListener("install", () => self.skipWaiting());
self.addEventListener("activate", (event) => event.waitUntil(self.clients.claim()));

self.addEventListener("fetch", (event) => {
  const request = event.request;
  if (request.method !== "GET") return;
  const url = new URL(request.url);
  if (url.origin !== self.location.origin) return;
  if (!(url.pathname.startsWith("/bay/") || url.pathname.startsWith("/static/"))) return;
  if (url.pathname.endsWith("/sw.js")) return;
  event.respondWith(
    fetch(request)
      .then((response) => {
        if (response.ok && response.type === "basic" && !response.redirected) {
          const copy = response.clone();
          caches.open(CACHE).then((cache) => cache.put(request, copy));
        }
        return response;
      })
      .catch(() =>
        caches.match(request, { ignoreVary: true }).then((hit) => hit || new Response(
          "<!doctype html><meta charset=utf-8><title>No connection</title>" +
          "<p style='font:18px system-ui;padding:2rem'>No connection, and this page was not " +
          "opened on this tablet before. Drafts already started are kept; open them again " +
          "when the connection returns.</p>",
          { status: 503, headers: { "Content-Type": "text/html; charset=utf-8" } })))
  );
});

self.addEventListener("message", (event) => {
  if (event.data === "forget-pages") event.waitUntil(caches.delete(CACHE));
});
