/* outfile: a file written whole or not at all: buffered into a temporary
 * file beside its path, fsync'd, renamed into place, its folder fsync'd.
 * What export.c and report.c write goes through it. Not for HDF5 records
 * (the store's) nor plots (PLplot names its own files; plot_page.c). */
#include "analysis_internal.h"

#include <errno.h>
#include <fcntl.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

struct an_out {
    const char *path;
    char *tmp;          /* the temporary name, in path's folder */
    int fd;
    int error;          /* errno of the first failed write; 0 while all is well */
    size_t used;
    char buf[1 << 16];
};

static void flush(an_out *o) {
    size_t done = 0;
    while (!o->error && done < o->used) {
        ssize_t k = write(o->fd, o->buf + done, o->used - done);
        if (k < 0 && errno == EINTR) continue;
        if (k <= 0) o->error = k < 0 ? errno : EIO;
        else done += (size_t)k;
    }
    o->used = 0;
}

void an_out_write(an_out *o, const char *s, size_t len) {
    while (!o->error && len > 0) {
        if (o->used == sizeof o->buf) flush(o);
        size_t k = sizeof o->buf - o->used < len ? sizeof o->buf - o->used : len;
        memcpy(o->buf + o->used, s, k);
        o->used += k, s += k, len -= k;
    }
}

void an_out_printf(an_out *o, const char *fmt, ...) {
    char line[1024];
    va_list ap;
    va_start(ap, fmt);
    int len = vsnprintf(line, sizeof line, fmt, ap);
    va_end(ap);
    if (len < 0 || (size_t)len >= sizeof line) {
        if (!o->error) o->error = EOVERFLOW;
        return;
    }
    an_out_write(o, line, (size_t)len);
}

/* A temporary file beside path, or NULL with a message in err. */
an_out *an_out_open(const char *path, char *err, size_t errlen) {
    const char *slash = strrchr(path, '/');
    const char *base = slash ? slash + 1 : path;
    int dirlen = slash ? (int)(slash - path) + 1 : 0;
    if (!*base) {
        snprintf(err, errlen, "%s: not written: the path names a folder, not a file", path);
        return NULL;
    }
    an_out *o = malloc(sizeof *o);
    size_t len = strlen(path) + 16;
    char *tmp = malloc(len);
    if (!o || !tmp) {
        free(o), free(tmp);
        snprintf(err, errlen, "%s: not written: out of memory", path);
        return NULL;
    }
    snprintf(tmp, len, "%.*s.%s.XXXXXX", dirlen, path, base);
    int fd = mkostemp(tmp, O_CLOEXEC);
    if (fd < 0) {
        snprintf(err, errlen, "%s: not written: cannot create a temporary file in its folder: %s",
                 path, strerror(errno));
        free(o), free(tmp);
        return NULL;
    }
    (void)fchmod(fd, 0644);     /* mkostemp makes it 0600; an export is for others to read */
    *o = (an_out){.path = path, .tmp = tmp, .fd = fd};
    return o;
}

/* Drops the temporary file: nothing half-written is left. */
void an_out_abort(an_out *o) {
    if (o->fd >= 0) close(o->fd);
    unlink(o->tmp);
    free(o->tmp);
    free(o);
}

/* Everything written, fsync'd and renamed to its path; 0, or -1 with a
 * message naming the path and what failed (the temporary file removed). */
int an_out_finish(an_out *o, char *err, size_t errlen) {
    flush(o);
    const char *what = NULL;
    int saved = o->error;
    if (saved) what = "write";
    else if (fsync(o->fd) != 0) what = "fsync", saved = errno;
    if (close(o->fd) != 0 && !what) what = "close", saved = errno;
    o->fd = -1;
    if (!what && rename(o->tmp, o->path) != 0) what = "rename", saved = errno;
    if (what) {
        snprintf(err, errlen, "%s: not written (%s of the temporary file failed: %s)", o->path,
                 what, strerror(saved));
        an_out_abort(o);
        return -1;
    }
    /* The folder's entry to disk too; best effort, as some file systems
     * refuse fsync on a folder and the file itself is already whole. */
    char *slash = strrchr(o->tmp, '/');
    if (slash) slash[1] = '\0';
    int dfd = open(slash ? o->tmp : ".", O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (dfd >= 0) {
        (void)fsync(dfd);
        close(dfd);
    }
    free(o->tmp);
    free(o);
    return 0;
}
