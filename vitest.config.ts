import { configDefaults, defineConfig } from 'vitest/config'
import { defineVitestProject } from '@nuxt/test-utils/config'
import { fileURLToPath } from 'node:url'

const WHOLE_NIGHTS = 'tests/e2e/whole-night.test.ts'
const root = fileURLToPath(new URL('.', import.meta.url))
const alias = {
  '~': root,
  '#shared': fileURLToPath(new URL('./shared', import.meta.url)),
}

export default defineConfig({
  test: {
    projects: [
      {
        resolve: { alias },
        // Simulation-based checks (ARL, closed loops) need more than 5 s on 2 busy cores.
        test: { name: 'unit', include: ['tests/unit/**/*.test.ts'], environment: 'node', testTimeout: 60_000 },
      },
      await defineVitestProject({
        test: { name: 'nuxt', include: ['tests/nuxt/**/*.test.ts'], environment: 'nuxt' },
      }),
      {
        resolve: { alias },
        test: {
          name: 'e2e',
          include: ['tests/e2e/**/*.test.ts'],
          exclude: [...configDefaults.exclude, WHOLE_NIGHTS],
          environment: 'node',
          testTimeout: 120_000,
          hookTimeout: 300_000,
          fileParallelism: false,
          globalSetup: ['tests/e2e/global-setup.ts'],
        },
      },
      // Whole nights on an accelerated clock: minutes of mostly waiting for the plant clock, so
      // `npm test` runs them in a process of their own beside the rest (scripts/test.mjs).
      {
        resolve: { alias },
        test: {
          name: 'nights',
          include: [WHOLE_NIGHTS],
          environment: 'node',
          testTimeout: 600_000,
          hookTimeout: 300_000,
          globalSetup: ['tests/e2e/global-setup.ts'],
        },
      },
    ],
  },
})
