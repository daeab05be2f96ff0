// Pages need a session; a page may also name the roles it is for (definePageMeta({ roles })).
import type { Role } from '#shared/types/auth'

export default defineNuxtRouteMiddleware((to) => {
  const { loggedIn, user } = useUserSession()
  if (to.meta.public) return
  if (!loggedIn.value) return navigateTo({ path: '/sign-in', query: to.fullPath !== '/' ? { next: to.fullPath } : {} })
  const roles = to.meta.roles as Role[] | undefined
  if (!roleMayOpen(user.value?.role, roles))
    return abortNavigation(createError({ statusCode: 403, message: `This page is for ${roles!.join(', ')}.` }))
})
