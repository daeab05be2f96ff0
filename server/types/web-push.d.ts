// The part of the `web-push` library (3.x) that server/utils/alerts/web-push-send.ts uses: the package
// ships no types. Names and options as in its README (sendNotification, generateVAPIDKeys).
declare module 'web-push' {
  import type { Agent } from 'node:https'

  interface PushSubscription { endpoint: string, keys: { p256dh: string, auth: string } }
  interface VapidDetails { subject: string, publicKey: string, privateKey: string }
  interface RequestOptions {
    vapidDetails?: VapidDetails
    TTL?: number
    urgency?: 'very-low' | 'low' | 'normal' | 'high'
    topic?: string
    contentEncoding?: 'aesgcm' | 'aes128gcm'
    headers?: Record<string, string>
    agent?: Agent
    proxy?: string
    timeout?: number
  }
  interface SendResult { statusCode: number, body: string, headers: Record<string, string> }

  const webpush: {
    generateVAPIDKeys(): { publicKey: string, privateKey: string }
    sendNotification(subscription: PushSubscription, payload?: string | Buffer | null, options?: RequestOptions): Promise<SendResult>
  }
  export default webpush
}
