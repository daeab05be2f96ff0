export default defineEventHandler(async (event) => requireUser(event))
