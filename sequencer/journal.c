/* journal: the run's append-only journal.jsonl, one JSON object a line with
 * "event" and "time" first, each line fsync'd before the call returns and
 * taken back whole if it could not be written (several lines appended
 * together: one write, one fsync, all of them or none); safe from any
 * thread.
 * Not for deciding what a line says (store.c writes the shot lines, the CLI
 * the start, resume and stop lines) nor for reading a journal back. */
#include "store.h"

#include <errno.h>
#include <jansson.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

/* Private to the store module, defined in store.c: the journal's file
 * descriptor, with the journal's own lock held until the unlock. */
int store_journal_lock(store *s);
void store_journal_unlock(store *s);

void journal_time_now(char *buf, size_t n) {
    struct timespec ts;
    struct tm tm;
    clock_gettime(CLOCK_REALTIME, &ts);
    gmtime_r(&ts.tv_sec, &tm);
    char seconds[32];
    strftime(seconds, sizeof seconds, "%Y-%m-%dT%H:%M:%S", &tm);
    snprintf(buf, n, "%s.%06ldZ", seconds, (long)(ts.tv_nsec / 1000));
}

/* A new object with event and time first, then the keys of object in their
 * order (any event or time in it gives way to the arguments). */
static json_t *ordered_line(const char *event, json_t *object) {
    char now[40];
    journal_time_now(now, sizeof now);
    json_t *line = json_object();
    if (!line || json_object_set_new(line, "event", json_string(event)) != 0 ||
        json_object_set_new(line, "time", json_string(now)) != 0) {
        json_decref(line);
        return NULL;
    }
    const char *key;
    json_t *value;
    json_object_foreach(object, key, value) {
        if (strcmp(key, "event") == 0 || strcmp(key, "time") == 0) continue;
        if (json_object_set(line, key, value) != 0) {
            json_decref(line);
            return NULL;
        }
    }
    return line;
}

static int write_all(int fd, const char *p, size_t len) {
    while (len > 0) {
        ssize_t put = write(fd, p, len);
        if (put < 0 && errno == EINTR) continue;
        if (put < 0) return -1;
        p += put;
        len -= (size_t)put;
    }
    return 0;
}

/* Appends text (whole lines) and fsyncs; on failure cuts the file back to
 * where it was, so a reader never meets half a line. */
static int append_line(int fd, const char *text, size_t len, size_t lines, char *err,
                       size_t errlen) {
    struct stat st;
    if (fstat(fd, &st) != 0) {
        snprintf(err, errlen, "cannot append to journal.jsonl: %s", strerror(errno));
        return -1;
    }
    if (write_all(fd, text, len) == 0 && fsync(fd) == 0) return 0;
    int saved = errno;
    if (ftruncate(fd, st.st_size) == 0) (void)fsync(fd);
    snprintf(err, errlen, "cannot append to journal.jsonl: %s; the %s not written",
             strerror(saved), lines > 1 ? "lines were" : "line was");
    return -1;
}

/* object's line as text ending in a newline (malloc'd), *len its length;
 * NULL when it is no object or out of memory (err says which). The object
 * is consumed. */
static char *line_text(const char *event, json_t *given, size_t *len, char *err,
                       size_t errlen) {
    if (given && !json_is_object(given)) {
        json_decref(given);
        snprintf(err, errlen, "journal line '%s' is not a JSON object", event);
        return NULL;
    }
    json_t *line = ordered_line(event, given);
    json_decref(given);
    char *text = line ? json_dumps(line, JSON_COMPACT | JSON_PRESERVE_ORDER) : NULL;
    json_decref(line);
    if (!text) {
        snprintf(err, errlen, "cannot build journal line '%s': out of memory", event);
        return NULL;
    }
    *len = strlen(text);
    text[(*len)++] = '\n';      /* replaces the NUL; json_dumps left room for it */
    return text;
}

int journal_append(store *s, const char *event, void *object, char *err, size_t errlen) {
    return journal_append_lines(s, event, &object, 1, err, errlen);
}

int journal_append_lines(store *s, const char *event, void **objects, size_t n, char *err,
                         size_t errlen) {
    char *all = NULL;
    size_t len = 0;
    int rc = 0;
    for (size_t i = 0; i < n; i++) {
        size_t one = 0;
        char *text = rc == 0 ? line_text(event, objects[i], &one, err, errlen) : NULL;
        if (rc != 0) json_decref(objects[i]);
        char *grown = text ? realloc(all, len + one) : NULL;
        if (text && !grown) snprintf(err, errlen, "cannot build journal line '%s': out of memory",
                                     event);
        if (grown) {
            memcpy(grown + len, text, one);
            all = grown;
            len += one;
        } else {
            rc = -1;
        }
        free(text);
    }
    if (rc == 0 && len > 0) {
        int fd = store_journal_lock(s);
        rc = append_line(fd, all, len, n, err, errlen);
        store_journal_unlock(s);
    }
    free(all);
    return rc;
}
