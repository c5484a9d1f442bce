/* plot_page: one page drawn by PLplot's cairo drivers into BASE.png and
 * BASE.svg, each under a temporary name in BASE's folder, renamed only when
 * both are whole; PLplot's error and exit handlers caught so that nothing
 * prints and nothing exits. Not for what is on the page (plot.c,
 * plot_axes.c, plot_map.c). PLplot keeps global state: not reentrant. */
#include "plot_page.h"

#include <errno.h>
#include <fcntl.h>
#include <plplot.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define TEXT_HEIGHT 6.3         /* mm in PLplot's terms, the same on every page (its
                                 * default grows with the page) */

static const int colour_rgb[AN_NCOLOURS][3] = {
    {255, 255, 255},            /* background */
    {0, 0, 0},                  /* frame and text */
    {222, 222, 222},            /* grid */
    {31, 100, 180},             /* data */
    {214, 39, 40},              /* fit */
    {70, 70, 70},               /* notes */
    {130, 130, 130},            /* zero line */
    {120, 160, 210},            /* error bars, a lighter data colour */
};

int an_page_fail(char *err, size_t errlen, const char *fmt, ...) {
    if (err && errlen) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err, errlen, fmt, ap);
        va_end(ap);
    }
    return -1;
}

const char *an_page_text(const char *text, char *buf, size_t n) {
    size_t k = 0;
    for (const char *p = text ? text : ""; *p && k + 2 < n; p++) {
        if (*p == '#') buf[k++] = '#';
        buf[k++] = *p;
    }
    buf[k] = '\0';
    return buf;
}

void an_page_title(const char *title, double left, double right, double top) {
    if (!title || !*title) return;
    char buf[512];
    PLFLT ch, scaled;
    plgchr(&ch, &scaled);
    plvpor(left, right, top, top + 0.01);
    plwind(0, 1, 0, 1);
    plcol0(AN_COL_AXIS);
    plschr(0, scaled / ch * 1.2);
    plmtex("t", 1.9, 0.5, 0.5, an_page_text(title, buf, sizeof buf));
    plschr(0, scaled / ch);
}

/* ---- PLplot's handlers ---------------------------------------------------- */

/* PLplot reports recoverable errors through its abort handler and ends the
 * process through its exit handler (no drivers at all, say); both are
 * caught, the second by jumping back out of PLplot. The handlers take no
 * user data, so what they need is file-scope state: the one exception here
 * to "no mutable globals", and one more reason these plots are not
 * reentrant (PLplot's own stream is global too). */
static char plplot_error[256];
static jmp_buf plplot_exit;

static void on_plplot_abort(PLCHAR_VECTOR message) {
    if (!plplot_error[0]) snprintf(plplot_error, sizeof plplot_error, "%s", message);
}

static int on_plplot_exit(PLCHAR_VECTOR message) {
    on_plplot_abort(message);
    longjmp(plplot_exit, 1);
}

typedef struct {
    const an_page *page;
    const char *device, *path;
    int drawn;                  /* the page's draw returned this */
} session;

/* Run step with PLplot's handlers caught: its result, or -1 when PLplot
 * gave up (plplot_error says why); then PLplot's stream is ended, as its
 * exit would have done. */
static int guarded(int (*step)(session *), session *s) {
    volatile int rc = -1;
    plplot_error[0] = '\0';
    plsabort(on_plplot_abort);
    plsexit(on_plplot_exit);
    if (setjmp(plplot_exit) == 0) {
        rc = step(s);
    } else if (setjmp(plplot_exit) == 0) {
        plend();
    }
    plsexit(NULL);
    plsabort(NULL);
    return rc;
}

/* Whether PLplot has the device: asked first, since plinit would prompt on
 * the terminal for another one. */
static int has_device(session *s) {
    enum { MAX_DEVICES = 128 };
    PLCHAR_VECTOR menu[MAX_DEVICES], names[MAX_DEVICES];
    PLCHAR_VECTOR *pm = menu, *pn = names;
    int n = MAX_DEVICES;
    plgDevs(&pm, &pn, &n);
    for (int i = 0; i < n; i++)
        if (names[i] && strcmp(names[i], s->device) == 0) return 0;
    return 1;
}

static int draw_session(session *s) {
    const an_page *p = s->page;
    plsdev(s->device);
    plsfnam(s->path);
    plspage(0, 0, p->width, p->height, 0, 0);
    plscmap0n(AN_NCOLOURS);
    for (int k = 0; k < AN_NCOLOURS; k++)
        plscol0(k, colour_rgb[k][0], colour_rgb[k][1], colour_rgb[k][2]);
    plscolbg(255, 255, 255);
    plinit();
    s->drawn = 0;
    if (!plplot_error[0]) {
        pladv(0);
        plschr(TEXT_HEIGHT, 1.0);
        s->drawn = p->draw(p->data);
    }
    plend();
    return plplot_error[0] ? -1 : 0;
}

/* ---- the files ------------------------------------------------------------ */

/* XML text: the five characters that must be escaped, and no control
 * characters. */
static void xml_text(FILE *out, const char *text) {
    for (const unsigned char *c = (const unsigned char *)(text ? text : ""); *c; c++) {
        if (*c == '<') fputs("&lt;", out);
        else if (*c == '>') fputs("&gt;", out);
        else if (*c == '&') fputs("&amp;", out);
        else if (*c == '"') fputs("&quot;", out);
        else if (*c < 0x20 && *c != '\n' && *c != '\t') fputc(' ', out);
        else fputc(*c, out);
    }
}

static char *slurp(const char *path, size_t *len) {
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    char *buf = NULL;
    if (fseek(f, 0, SEEK_END) == 0) {
        long size = ftell(f);
        if (size > 0 && fseek(f, 0, SEEK_SET) == 0 && (buf = malloc((size_t)size + 1))) {
            *len = fread(buf, 1, (size_t)size, f);
            buf[*len] = '\0';
        }
    }
    fclose(f);
    return buf;
}

/* Flush path's data to the disk before it is renamed into place. */
static int sync_file(const char *path) {
    int fd = open(path, O_RDONLY);
    if (fd < 0) return -1;
    int rc = fsync(fd);
    close(fd);
    return rc;
}

/* Put <title> and <desc> right after the SVG's opening <svg ...> tag. */
static int add_svg_text(const char *path, const an_page *p) {
    size_t len = 0;
    char *svg = slurp(path, &len);
    char *open = svg ? strstr(svg, "<svg") : NULL;
    char *end = open ? strchr(open, '>') : NULL;
    if (!end) {
        free(svg);
        return -1;
    }
    FILE *out = fopen(path, "wb");
    int rc = -1;
    if (out) {
        size_t head = (size_t)(end + 1 - svg);
        fwrite(svg, 1, head, out);
        fputs("\n<title>", out);
        xml_text(out, p->svg_title);
        fputs("</title>\n<desc>", out);
        xml_text(out, p->svg_desc);
        fputs("</desc>", out);
        fwrite(svg + head, 1, len - head, out);
        rc = ferror(out) ? -1 : 0;
        if (fclose(out) != 0) rc = -1;
    }
    free(svg);
    return rc;
}

typedef struct {
    const char *device, *suffix;
    char final[4096], temp[4096];
} output;

/* A temporary file beside the final one, made with the mode a new file
 * gets (0666 less the umask): proves the folder writable, and is what
 * PLplot writes (it would prompt on the terminal for a name it cannot
 * open). */
static int make_temp(output *o, const char *base, char *err, size_t errlen) {
    int n = snprintf(o->final, sizeof o->final, "%s.%s", base, o->suffix);
    if (n < 0 || (size_t)n + 32 >= sizeof o->final)
        return an_page_fail(err, errlen, "cannot write %s.%s: the name is too long", base,
                            o->suffix);
    for (int k = 0; k < 100; k++) {
        snprintf(o->temp, sizeof o->temp, "%s.%ld-%d.tmp", o->final, (long)getpid(), k);
        int fd = open(o->temp, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
        if (fd >= 0) {
            close(fd);
            return 0;
        }
        if (errno != EEXIST) break;
    }
    int e = errno;
    o->temp[0] = '\0';
    return an_page_fail(err, errlen, "cannot write %s: %s", o->final, strerror(e));
}

static int render(output *o, const an_page *p, char *err, size_t errlen) {
    session s = {.page = p, .device = o->device, .path = o->temp};
    int rc = guarded(has_device, &s);
    if (rc < 0) return an_page_fail(err, errlen, "PLplot cannot start: %s", plplot_error);
    if (rc > 0)
        return an_page_fail(err, errlen, "PLplot has no %s device; install "
                            "plplot-driver-cairo", o->device);
    if (guarded(draw_session, &s))
        return an_page_fail(err, errlen, "cannot draw %s into %s: PLplot: %s", p->what,
                            o->final, plplot_error);
    if (s.drawn) return an_page_fail(err, errlen, "out of memory drawing %s", p->what);
    struct stat st;
    if (stat(o->temp, &st) != 0 || st.st_size == 0)
        return an_page_fail(err, errlen, "PLplot wrote nothing for %s; is "
                            "plplot-driver-cairo installed?", o->final);
    if (strcmp(o->suffix, "svg") == 0 && add_svg_text(o->temp, p))
        return an_page_fail(err, errlen, "cannot finish %s: %s", o->final, strerror(errno));
    if (sync_file(o->temp))
        return an_page_fail(err, errlen, "cannot write %s: %s", o->final, strerror(errno));
    return 0;
}

int an_page_write(const an_page *p, char *err, size_t errlen) {
    if (!p->base || !*p->base) return an_page_fail(err, errlen, "no file name for %s", p->what);
    output out[2] = {{.device = "pngcairo", .suffix = "png"},
                     {.device = "svgcairo", .suffix = "svg"}};
    int rc = 0;
    for (size_t k = 0; k < 2 && rc == 0; k++) {
        rc = make_temp(&out[k], p->base, err, errlen);
        if (rc == 0) rc = render(&out[k], p, err, errlen);
    }
    for (size_t k = 0; k < 2 && rc == 0; k++)
        if (rename(out[k].temp, out[k].final) != 0) {
            rc = an_page_fail(err, errlen, "cannot write %s: %s", out[k].final,
                              strerror(errno));
            if (k == 1) unlink(out[0].final);
        } else {
            out[k].temp[0] = '\0';
        }
    for (size_t k = 0; k < 2; k++)
        if (out[k].temp[0]) unlink(out[k].temp);
    return rc;
}
