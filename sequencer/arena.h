/* arena: one bump allocator per plan or compiled plan, freed at once.
 * Not a general allocator: nothing allocated here is freed alone. */
#ifndef PRECESS_ARENA_H
#define PRECESS_ARENA_H

#include <stddef.h>

typedef struct arena arena;

arena *arena_new(void);
void arena_free(arena *a);                  /* frees every block at once */
/* Zeroed memory aligned for any type, or NULL when out of memory. */
void *arena_alloc(arena *a, size_t size);
/* Grow an array allocated here (old contents copied; old block stays). */
void *arena_grow(arena *a, void *old, size_t old_size, size_t new_size);
char *arena_strndup(arena *a, const char *s, size_t len);
char *arena_strdup(arena *a, const char *s);
size_t arena_used(const arena *a);           /* bytes handed out */

#endif
