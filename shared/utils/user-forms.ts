// Form schemas for user administration, shared by the page (live messages) and the API.
import { z } from 'zod'
import { ROLE_NAMES } from '../types/auth'

export const passwordRule = z.string().min(10, 'Use at least 10 characters.').max(200, 'Use at most 200 characters.')

export const newUserSchema = z.object({
  email: z.string().trim().toLowerCase().email('Enter an e-mail address.'),
  name: z.string().trim().min(2, 'Enter the person\'s name.').max(80),
  role: z.enum(ROLE_NAMES, 'Pick one of the roles.'),
  password: passwordRule,
})

export const userChangeSchema = z.object({
  name: z.string().trim().min(2).max(80).optional(),
  role: z.enum(ROLE_NAMES, 'Pick one of the roles.').optional(),
  disabled: z.boolean().optional(),
}).refine(v => Object.keys(v).length > 0, 'Change at least one field.')

export const passwordResetSchema = z.object({ password: passwordRule })
