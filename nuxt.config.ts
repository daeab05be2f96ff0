import { fileURLToPath } from 'node:url'

// Owlshift — Nuxt configuration. Root-level layout (srcDir '.'): docs/architecture.md#folders.
export default defineNuxtConfig({
  compatibilityDate: '2026-06-01',
  srcDir: '.',
  serverDir: 'server',
  devtools: { enabled: false },
  telemetry: false,
  modules: ['@pinia/nuxt', '@nuxtjs/tailwindcss', 'nuxt-auth-utils'],
  css: ['~/assets/css/main.css'],
  tailwindcss: { cssPath: false, configPath: 'tailwind.config.ts', viewer: false },
  app: {
    head: {
      title: 'Owlshift',
      htmlAttrs: { lang: 'en' },
      meta: [
        { name: 'viewport', content: 'width=device-width, initial-scale=1, viewport-fit=cover' },
        { name: 'description', content: 'Owlshift watches lights-out grinding cells through the night.' },
        { name: 'theme-color', content: '#0f1720' },
      ],
      link: [{ rel: 'icon', type: 'image/svg+xml', href: '/owlshift.svg' }],
    },
  },
  runtimeConfig: {
    // Every value here can be overridden by NUXT_* variables; server/utils/platform/config.ts
    // reads the documented plain names (DATABASE_URL, …) and validates them at start.
    session: {
      name: 'owlshift-session',
      password: '',
      cookie: { secure: true, sameSite: 'lax' },
      maxAge: 60 * 60 * 12,
    },
  },
  nitro: {
    // Migrations travel inside the built server, so `node .output/server/index.mjs` needs no sources.
    serverAssets: [{ baseName: 'migrations', dir: fileURLToPath(new URL('./server/database/migrations', import.meta.url)) }],
    experimental: { tasks: false },
    // @libsql/client ships native bindings; keep it external to the server bundle. The tracer misses
    // the "module-sync" entry files of three small packages the Twilio library pulls in (through
    // get-intrinsic), which Node 20.19+ loads: name them.
    externals: {
      external: ['@libsql/client', 'libsql'],
      traceInclude: ['async-function', 'async-generator-function', 'generator-function'].map(p => fileURLToPath(new URL(`./node_modules/${p}/require.mjs`, import.meta.url))),
    },
  },
  typescript: { strict: true },
})
