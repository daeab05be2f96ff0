// Request bodies over the route's limit are refused (413) before they are read: server/utils/platform/body-limit.ts.
export default defineEventHandler(event => enforceBodyLimit(event))
