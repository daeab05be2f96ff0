import type { Config } from 'tailwindcss'
export default { content: [] } satisfies Config
