/* arena: blocks chained from the newest; allocation bumps a pointer.
 * Not thread-safe: one arena belongs to one owner. */
#include "arena.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define ARENA_BLOCK (64 * 1024)
#define ARENA_ALIGN 16

typedef struct block {
    struct block *next;
    size_t size, used;
    _Alignas(ARENA_ALIGN) unsigned char data[];
} block;

struct arena {
    block *head;
    size_t handed;
};

arena *arena_new(void) { return calloc(1, sizeof(arena)); }

void arena_free(arena *a) {
    if (!a) return;
    block *b = a->head;
    while (b) {
        block *next = b->next;
        free(b);
        b = next;
    }
    free(a);
}

void *arena_alloc(arena *a, size_t size) {
    size_t need = (size + ARENA_ALIGN - 1) & ~(size_t)(ARENA_ALIGN - 1);
    if (need < size) return NULL;
    if (need == 0) need = ARENA_ALIGN;
    block *b = a->head;
    if (!b || b->size - b->used < need) {
        size_t cap = need > ARENA_BLOCK ? need : ARENA_BLOCK;
        block *nb = malloc(sizeof(block) + cap);
        if (!nb) return NULL;
        nb->size = cap;
        nb->used = 0;
        /* Keep the partly used head first when the new block is a one-off. */
        if (b && need > ARENA_BLOCK) {
            nb->next = b->next;
            b->next = nb;
        } else {
            nb->next = b;
            a->head = nb;
        }
        b = nb;
    }
    void *p = b->data + b->used;
    b->used += need;
    a->handed += size;
    memset(p, 0, size);
    return p;
}

void *arena_grow(arena *a, void *old, size_t old_size, size_t new_size) {
    void *p = arena_alloc(a, new_size);
    if (p && old && old_size) memcpy(p, old, old_size < new_size ? old_size : new_size);
    return p;
}

char *arena_strndup(arena *a, const char *s, size_t len) {
    char *p = arena_alloc(a, len + 1);
    if (p) {
        memcpy(p, s, len);
        p[len] = '\0';
    }
    return p;
}

char *arena_strdup(arena *a, const char *s) { return arena_strndup(a, s, strlen(s)); }

size_t arena_used(const arena *a) { return a->handed; }
