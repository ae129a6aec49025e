/* The rounds app's service worker: keeps the round pages, their rules and their assets on the device, so a route
   opened once can be walked with no signal. Everything comes from this site; nothing from the internet.

   Pages and rules: the network first (fresh "last reading" and token when there is signal), the kept copy when
   there is none. Writes are never touched here: readings wait in the page's IndexedDB queue (rounds-offline.js). */

const CACHE = "fleet-rounds-1";
const ASSETS = [
  "/static/fleet.css", "/static/pumps.css", "/static/print.js", "/static/rounds-offline.js",
  "/static/rounds.webmanifest", "/static/rounds-icon.svg",
];  // public files only: the pages need a signed-in user, so the pages themselves ask to be kept (message below)

self.addEventListener("install", (event) => {
  event.waitUntil(caches.open(CACHE).then((cache) => cache.addAll(ASSETS)).then(() => self.skipWaiting()));
});

self.addEventListener("activate", (event) => {
  event.waitUntil(caches.keys()
    .then((names) => Promise.all(names.filter((n) => n.startsWith("fleet-rounds-") && n !== CACHE)
      .map((n) => caches.delete(n))))
    .then(() => self.clients.claim()));
});

// A page asks for the other stops of its route (and their rules) to be kept while there is signal.
self.addEventListener("message", (event) => {
  const urls = event.data && event.data.keep;
  if (!Array.isArray(urls)) return;
  const own = urls.filter((url) => new URL(url, self.location.origin).origin === self.location.origin);
  const reply = event.ports && event.ports[0];
  event.waitUntil(caches.open(CACHE).then((cache) => Promise.all(own.map((url) =>
    fetch(url, {credentials: "same-origin"}).then((response) => keepable(response) && cache.put(url, response)
      .then(() => true)).catch(() => false))))
    .then((done) => reply && reply.postMessage({kept: done.filter(Boolean).length, asked: own.length})));
});

function keepable(response) {
  // Only a page really served: not a redirect to the sign-in page, not an error.
  return response && response.ok && !response.redirected && response.type === "basic";
}

function kept(path) {
  return path === "/rounds" || path.startsWith("/rounds/") || path.startsWith("/static/");
}

self.addEventListener("fetch", (event) => {
  const request = event.request;
  const url = new URL(request.url);
  if (request.method !== "GET" || url.origin !== self.location.origin || !kept(url.pathname)
      || url.pathname === "/rounds/session.json") {
    return;  // the browser fetches it as usual
  }
  event.respondWith(fetch(request).then((response) => {
    if (keepable(response)) {
      const copy = response.clone();
      caches.open(CACHE).then((cache) => cache.put(request, copy));
    }
    return response;
  }).catch(() => caches.open(CACHE).then((cache) => cache.match(request)).then((found) => found
    || new Response("<!doctype html><title>No signal</title><p>No signal, and this page was not opened here " +
      "before. Open a route you opened with signal, or try again when the connection is back.</p>",
    {status: 503, headers: {"Content-Type": "text/html; charset=utf-8"}}))));
});
