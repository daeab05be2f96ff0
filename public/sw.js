// Owlshift service worker: shows the alerts the server pushes (Web Push), opens the alarm page when
// a notification is clicked, and acknowledges the alarm from the notification where the browser
// offers action buttons. Plain script, no build step, no caching of pages (Owlshift is live data).
/* eslint-env serviceworker */

self.addEventListener('install', () => self.skipWaiting())
self.addEventListener('activate', event => event.waitUntil(self.clients.claim()))

self.addEventListener('push', (event) => {
  let data = {}
  try { data = event.data ? event.data.json() : {} }
  catch { data = { body: event.data ? event.data.text() : '' } }
  const canAct = typeof Notification !== 'undefined' && 'actions' in Notification.prototype && (Notification.maxActions ?? 0) > 0
  const options = {
    body: data.body || '',
    tag: data.tag || undefined,
    renotify: !!data.tag,
    requireInteraction: !!data.requireInteraction,
    icon: '/owlshift.svg',
    timestamp: Date.now(),
    data: { url: safePath(data.url), alarmId: data.alarmId ?? null, deliveryId: data.deliveryId ?? null },
    actions: canAct && data.alarmId ? [{ action: 'acknowledge', title: 'Acknowledge' }, { action: 'open', title: 'Open' }] : [],
  }
  event.waitUntil(self.registration.showNotification(data.title || 'Owlshift alert', options))
})

self.addEventListener('notificationclick', (event) => {
  const n = event.notification
  const d = n.data || {}
  n.close()
  if (event.action === 'acknowledge' && d.alarmId) {
    // Acknowledge in place; if that is refused (signed out, role, already handled) open the page instead.
    event.waitUntil(Promise.all([report(d), acknowledge(d.alarmId).then(ok => (ok ? undefined : openPage(d.url)))]))
    return
  }
  event.waitUntil(Promise.all([report(d), openPage(d.url)]))
})

function safePath(url) {
  // Only paths on this site: a push payload never sends the browser elsewhere.
  return typeof url === 'string' && url.startsWith('/') && !url.startsWith('//') ? url : '/'
}

function post(path, body) {
  return fetch(path, { method: 'POST', credentials: 'same-origin', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) })
}

function report(d) {
  if (!d.deliveryId) return Promise.resolve()
  return post('/api/push/clicked', { deliveryId: d.deliveryId }).catch(() => undefined)
}

function acknowledge(alarmId) {
  return post(`/api/alarms/${encodeURIComponent(alarmId)}/acknowledge`, { note: 'acknowledged from a notification' })
    .then(res => res.ok, () => false)
}

async function openPage(path) {
  const url = new URL(path || '/', self.location.origin).href
  const windows = await self.clients.matchAll({ type: 'window', includeUncontrolled: true })
  for (const w of windows) {
    if (new URL(w.url).origin !== self.location.origin) continue
    await w.focus()
    return 'navigate' in w ? w.navigate(url) : undefined
  }
  return self.clients.openWindow(url)
}
