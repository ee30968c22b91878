/* The report's one plot type: lines over x, drawn as inline SVG with axes, ticks, units,
 * vertical marks and a legend. Colour-blind safe: the Okabe-Ito palette (Okabe & Ito, "Color
 * Universal Design", 2008), and every line also has its own marker shape and dash pattern. */
#include <math.h>
#include <string.h>

#include "html_int.h"

#define W           880.0
#define H           300.0
#define LEFT        78.0
#define RIGHT       20.0
#define TOP         30.0
#define BOTTOM      46.0
#define LEGEND_ROW  20.0
#define LEGEND_COLS 3
#define MARKERS     10 /* marker shapes drawn per line, evenly spaced */

/* Okabe-Ito, reordered so the first colours have the most contrast on white; yellow last. */
static const char *const palette[] = {"#0072B2", "#D55E00", "#009E73", "#CC79A7",
                                      "#E69F00", "#56B4E9", "#000000", "#F0E442"};
static const char *const dashes[] = {"", "7 4", "2 3", "9 3 2 3"};

void html_esc(FILE *f, const char *s)
{
    for (; s && *s; s++) {
        switch (*s) {
        case '&':
            fputs("&amp;", f);
            break;
        case '<':
            fputs("&lt;", f);
            break;
        case '>':
            fputs("&gt;", f);
            break;
        case '"':
            fputs("&quot;", f);
            break;
        default:
            fputc(*s, f);
        }
    }
}

typedef struct {
    double lo, hi; /* data range, in axis units (log10 for a log axis) */
    double px0, px1;
    bool log;
} axis_t;

static double ax_map(const axis_t *a, double v)
{
    double span = a->hi > a->lo ? a->hi - a->lo : 1;
    return a->px0 + (v - a->lo) / span * (a->px1 - a->px0);
}

static bool xok(const html_plot_t *p, double x)
{
    return !isnan(x) && (p->xaxis != HTML_X_LOG || x > 0);
}

static double xval(const html_plot_t *p, double x)
{
    return p->xaxis == HTML_X_LOG ? log10(x) : x;
}

static bool yval(const html_plot_t *p, double y, double *out)
{
    if (isnan(y) || (p->ylog && y <= 0))
        return false;
    *out = p->ylog ? log10(y) : y;
    return true;
}

/* The data range of every drawable point. */
static void ranges(const html_plot_t *p, const html_line_t *l, size_t n, axis_t *x, axis_t *y)
{
    x->lo = y->lo = INFINITY;
    x->hi = y->hi = -INFINITY;
    for (size_t i = 0; i < n; i++)
        for (size_t k = 0; k < l[i].n; k++) {
            double yv;
            if (!yval(p, l[i].y[k], &yv) || !xok(p, l[i].x[k]))
                continue;
            double xv = xval(p, l[i].x[k]);
            x->lo = fmin(x->lo, xv), x->hi = fmax(x->hi, xv);
            y->lo = fmin(y->lo, yv), y->hi = fmax(y->hi, yv);
        }
    if (x->lo > x->hi)
        x->lo = 0, x->hi = 1;
    if (y->lo > y->hi)
        y->lo = 0, y->hi = 1;
    if (p->xaxis == HTML_X_LOG && p->xmax > p->xmin && p->xmin > 0) /* thresholds stay in view */
        x->lo = fmin(x->lo, log10(p->xmin)), x->hi = fmax(x->hi, log10(p->xmax));
    if (p->xaxis == HTML_X_LOG)
        x->lo = floor(x->lo), x->hi = fmax(ceil(x->hi), x->lo + 1);
    else if (p->xmax > p->xmin)
        x->lo = p->xmin, x->hi = p->xmax;
    else
        x->lo = fmin(0, x->lo);
    for (size_t i = 0; i < p->n_levels; i++) { /* thresholds stay in view */
        double yv;
        if (yval(p, p->levels[i].y, &yv))
            y->lo = fmin(y->lo, yv), y->hi = fmax(y->hi, yv);
    }
    if (p->yzero && !p->ylog)
        y->lo = fmin(0, y->lo);
    if (p->ylog)
        y->lo = floor(y->lo), y->hi = fmax(ceil(y->hi), y->lo + 1);
    if (y->hi - y->lo < 1e-12)
        y->hi = y->lo + (y->lo != 0 ? fabs(y->lo) * 0.1 : 1);
    if (!p->ylog)
        y->hi += (y->hi - y->lo) * 0.05;
}

/* A "nice" tick step (1, 2 or 5 times a power of ten) giving at most about six ticks. */
static double nice_step(double span)
{
    double raw = span / 6, mag = pow(10, floor(log10(raw)));
    double n = raw / mag;
    return (n <= 1 ? 1 : n <= 2 ? 2 : n <= 5 ? 5 : 10) * mag;
}

void html_num(double v, char *buf, size_t cap)
{
    if (!isfinite(v)) {
        snprintf(buf, cap, "-");
        return;
    }
    if (fabs(v) >= 1000) { /* whole, without separators: the terminal's style */
        snprintf(buf, cap, "%.0f", v);
        return;
    }
    if (fabs(v) < 1e-12) {
        snprintf(buf, cap, "0");
        return;
    }
    int decimals = (int)fmax(0, 2 - floor(log10(fabs(v)))); /* three significant digits */
    snprintf(buf, cap, "%.*f", decimals, v);
    if (strchr(buf, '.')) { /* no trailing zeros */
        char *e = buf + strlen(buf) - 1;
        while (*e == '0')
            *e-- = '\0';
        if (*e == '.')
            *e = '\0';
    }
}

static void tick_label(double v, char *buf, size_t cap)
{
    html_num(v, buf, cap);
}

static void yticks(FILE *f, const html_plot_t *p, const axis_t *y)
{
    double step = p->ylog ? 1 : nice_step(y->hi - y->lo);
    if (p->ywhole && !p->ylog)
        step = fmax(step, 1); /* no "1.5 streams" */
    for (double v = ceil(y->lo / step) * step; v <= y->hi + 1e-9 * step; v += step) {
        double py = ax_map(y, v);
        char lab[32];
        tick_label(p->ylog ? pow(10, v) : v, lab, sizeof lab);
        fprintf(f, "<line class=\"grid\" x1=\"%.1f\" x2=\"%.1f\" y1=\"%.1f\" y2=\"%.1f\"/>", LEFT,
                W - RIGHT, py, py);
        fprintf(f, "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\">%s</text>\n",
                LEFT - 6, py + 4, lab);
    }
}

static void xticks(FILE *f, const html_plot_t *p, const axis_t *x)
{
    bool lg = p->xaxis == HTML_X_LOG;
    double step = lg ? 1 : nice_step(x->hi - x->lo);
    for (double v = ceil(x->lo / step) * step; v <= x->hi + 1e-9 * step; v += step) {
        double px = ax_map(x, v);
        char lab[32];
        tick_label(lg ? pow(10, v) : v, lab, sizeof lab);
        fprintf(f, "<line class=\"tick\" x1=\"%.1f\" x2=\"%.1f\" y1=\"%.1f\" y2=\"%.1f\"/>", px, px,
                H - BOTTOM, H - BOTTOM + 5);
        fprintf(f, "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">%s</text>\n",
                px, H - BOTTOM + 18, lab);
    }
}

static void marker(FILE *f, int style, double x, double y)
{
    const char *c = palette[style % 8];
    switch (style % 6) {
    case 0:
        fprintf(f, "<circle cx=\"%.1f\" cy=\"%.1f\" r=\"3.5\" fill=\"%s\"/>", x, y, c);
        break;
    case 1:
        fprintf(f, "<rect x=\"%.1f\" y=\"%.1f\" width=\"7\" height=\"7\" fill=\"%s\"/>", x - 3.5,
                y - 3.5, c);
        break;
    case 2:
        fprintf(f, "<path d=\"M%.1f %.1fl4 7h-8z\" fill=\"%s\"/>", x, y - 4.5, c);
        break;
    case 3:
        fprintf(f, "<path d=\"M%.1f %.1fl4.5 4.5-4.5 4.5-4.5-4.5z\" fill=\"%s\"/>", x, y - 4.5, c);
        break;
    case 4:
        fprintf(f, "<path d=\"M%.1f %.1fl4 -7h-8z\" fill=\"%s\"/>", x, y + 4.5, c);
        break;
    default:
        fprintf(f, "<path d=\"M%.1f %.1fl8 8m0 -8l-8 8\" stroke=\"%s\" stroke-width=\"2\"/>", x - 4,
                y - 4, c);
    }
}

static void line(FILE *f, const html_plot_t *p, const html_line_t *l, const axis_t *x,
                 const axis_t *y)
{
    fputs("<g class=\"series\" data-label=\"", f);
    html_esc(f, l->label);
    fprintf(
        f, "\"><path fill=\"none\" stroke=\"%s\" stroke-width=\"1.8\" stroke-dasharray=\"%s\" d=\"",
        palette[l->style % 8], dashes[l->dash % 4]);
    bool pen = false;
    for (size_t k = 0; k < l->n; k++) {
        double yv;
        if (!yval(p, l->y[k], &yv) || !xok(p, l->x[k])) {
            pen = false;
            continue;
        }
        fprintf(f, "%c%.1f %.1f", pen ? 'L' : 'M', ax_map(x, xval(p, l->x[k])), ax_map(y, yv));
        pen = true;
    }
    fputs("\"/>", f);
    /* Markers on every few points (offset per style so lines' markers do not coincide), and
     * on every point without a drawable neighbour: no line passes through it. */
    size_t every = l->n > MARKERS ? l->n / MARKERS : 1;
    for (size_t k = 0; k < l->n; k++) {
        double yv, nb;
        bool alone =
            (k == 0 || !yval(p, l->y[k - 1], &nb)) && (k + 1 == l->n || !yval(p, l->y[k + 1], &nb));
        if (yval(p, l->y[k], &yv) && xok(p, l->x[k]) &&
            (alone || k % every == (size_t)l->style % every))
            marker(f, l->style, ax_map(x, xval(p, l->x[k])), ax_map(y, yv));
    }
    fputs("</g>\n", f);
}

static void legend(FILE *f, const html_line_t *l, size_t n)
{
    double colw = (W - LEFT - RIGHT) / LEGEND_COLS;
    for (size_t i = 0; i < n; i++) {
        double x = LEFT + (double)(i % LEGEND_COLS) * colw;
        double y = H + 4 + (double)(i / LEGEND_COLS) * LEGEND_ROW;
        fprintf(f,
                "<g class=\"legend\"><path d=\"M%.1f %.1fh30\" stroke=\"%s\" stroke-width=\"2\" "
                "stroke-dasharray=\"%s\"/>",
                x, y, palette[l[i].style % 8], dashes[l[i].dash % 4]);
        marker(f, l[i].style, x + 15, y);
        fprintf(f, "<text x=\"%.1f\" y=\"%.1f\">", x + 38, y + 4);
        html_esc(f, l[i].label);
        fputs("</text></g>\n", f);
    }
}

/* The svg element, its axes, frame, bands, levels and marks; lines or cells are drawn after. */
static void frame(FILE *f, const html_plot_t *p, const char *cls, const axis_t *x,
                  const axis_t *y, double total_h, const html_mark_t *marks, size_t n_marks)
{
    fprintf(f,
            "<svg class=\"%s\" xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 %.0f %.0f\" "
            "role=\"img\" aria-label=\"",
            cls, W, total_h);
    html_esc(f, p->title);
    fputs("\">\n<title>", f);
    html_esc(f, p->title);
    fputs("</title>\n", f);
    for (size_t i = 0; i < p->n_bands; i++) { /* behind everything else */
        double a = fmax(LEFT, ax_map(x, xval(p, p->bands[i].x0)));
        double b = fmin(W - RIGHT, ax_map(x, xval(p, p->bands[i].x1)));
        if (b > a)
            fprintf(f,
                    "<rect class=\"band\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" "
                    "height=\"%.1f\"/>\n",
                    a, TOP, b - a, H - BOTTOM - TOP);
    }
    fputs("<g class=\"axis y\">", f);
    yticks(f, p, y);
    fprintf(f,
            "<text class=\"axis-label\" transform=\"translate(16 %.1f) rotate(-90)\" "
            "text-anchor=\"middle\">",
            (TOP + H - BOTTOM) / 2);
    html_esc(f, p->ylabel);
    fputs("</text></g>\n<g class=\"axis x\">", f);
    xticks(f, p, x);
    fprintf(f, "<text class=\"axis-label\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">",
            (LEFT + W - RIGHT) / 2, H - 8);
    html_esc(f, p->xlabel);
    fputs("</text>", f);
    if (p->xnote) {
        fprintf(f, "<text class=\"axis-note\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\">",
                W - RIGHT, H - 8);
        html_esc(f, p->xnote);
        fputs("</text>", f);
    }
    fprintf(f,
            "</g>\n<rect class=\"frame\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" "
            "height=\"%.1f\"/>\n",
            LEFT, TOP, W - LEFT - RIGHT, H - BOTTOM - TOP);
    for (size_t i = 0; i < p->n_levels; i++) {
        double yv;
        if (!yval(p, p->levels[i].y, &yv))
            continue;
        double py = ax_map(y, yv);
        const char *c = p->levels[i].style < 0 ? "#555" : palette[p->levels[i].style % 8];
        fprintf(f,
                "<g class=\"level\"><line x1=\"%.1f\" x2=\"%.1f\" y1=\"%.1f\" y2=\"%.1f\" "
                "stroke=\"%s\"/><text x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\" fill=\"%s\">",
                LEFT, W - RIGHT, py, py, c, W - RIGHT - 4, py - 4 < TOP + 12 ? py + 14 : py - 4, c);
        html_esc(f, p->levels[i].label);
        fputs("</text></g>\n", f);
    }
    /* Labels that would run into the one before them go one row lower (three rows; about 6.5 px
     * per character at the style sheet's size); marks outside the x range are left out. */
    double row_end[3] = {-1e9, -1e9, -1e9};
    for (size_t i = 0; i < n_marks; i++) {
        if (!xok(p, marks[i].x))
            continue;
        double px = ax_map(x, xval(p, marks[i].x));
        if (!(px >= LEFT - 0.5 && px <= W - RIGHT + 0.5))
            continue;
        int row = 0;
        while (row < 2 && px < row_end[row])
            row++;
        double width = 6.5 * (double)strlen(marks[i].label ? marks[i].label : "");
        bool left = px + 3 + width > W; /* a label that would run off the right: left of its line */
        row_end[row] = left ? px + 8 : px + 8 + width;
        fprintf(f,
                "<g class=\"mark%s\"><line x1=\"%.1f\" x2=\"%.1f\" y1=\"%.1f\" y2=\"%.1f\"/>"
                "<text x=\"%.1f\" y=\"%.1f\"%s>",
                marks[i].alert ? " drop" : "", px, px, TOP, H - BOTTOM, left ? px - 3 : px + 3,
                TOP - 6 + 14.0 * row, left ? " text-anchor=\"end\"" : "");
        html_esc(f, marks[i].label);
        fputs("</text></g>\n", f);
    }
}

void html_plot(FILE *f, const html_plot_t *p, const html_line_t *lines, size_t n_lines,
               const html_mark_t *marks, size_t n_marks)
{
    axis_t x = {.px0 = LEFT, .px1 = W - RIGHT}, y = {.px0 = H - BOTTOM, .px1 = TOP, .log = p->ylog};
    ranges(p, lines, n_lines, &x, &y);
    size_t entries = n_lines + (p->n_bands > 0);
    double total_h = H + 8 + LEGEND_ROW * (double)((entries + LEGEND_COLS - 1) / LEGEND_COLS);
    frame(f, p, "plot", &x, &y, total_h, marks, n_marks);
    for (size_t i = 0; i < n_lines; i++)
        line(f, p, &lines[i], &x, &y);
    legend(f, lines, n_lines);
    if (p->n_bands > 0) { /* the bands' legend entry, after the lines' */
        double colw = (W - LEFT - RIGHT) / LEGEND_COLS;
        double lx = LEFT + (double)(n_lines % LEGEND_COLS) * colw;
        double ly = H + 4 + (double)(n_lines / LEGEND_COLS) * LEGEND_ROW;
        fprintf(f,
                "<g class=\"legend\"><rect class=\"band key\" x=\"%.1f\" y=\"%.1f\" width=\"30\" "
                "height=\"12\"/><text x=\"%.1f\" y=\"%.1f\">",
                lx, ly - 6, lx + 38, ly + 4);
        html_esc(f, p->band_label ? p->band_label : "shaded");
        fputs("</text></g>\n", f);
    }
    fputs("</svg>\n", f);
}

/* A cell's shade: from a pale to a deep blue as log(count) goes from 0 to log(max). */
static void shade(double count, double max, char *buf, size_t cap)
{
    double t = max > 1 ? log(count) / log(max) : 1;
    t = 0.12 + 0.88 * fmin(1, fmax(0, t));
    static const double lo[3] = {0xe8, 0xf1, 0xf8}, hi[3] = {0x08, 0x30, 0x6b};
    snprintf(buf, cap, "#%02x%02x%02x", (int)(lo[0] + (hi[0] - lo[0]) * t),
             (int)(lo[1] + (hi[1] - lo[1]) * t), (int)(lo[2] + (hi[2] - lo[2]) * t));
}

void html_heat(FILE *f, const html_plot_t *p, const html_heat_t *h, const html_mark_t *marks,
               size_t n_marks)
{
    axis_t x = {.px0 = LEFT, .px1 = W - RIGHT}, y = {.px0 = H - BOTTOM, .px1 = TOP, .log = p->ylog};
    double max = 0;
    size_t ylo = h->ny, yhi = 0; /* the rows with any count */
    for (size_t ix = 0; ix < h->nx; ix++)
        for (size_t iy = 0; iy < h->ny; iy++)
            if (h->count[ix * h->ny + iy] > 0) {
                max = fmax(max, h->count[ix * h->ny + iy]);
                ylo = iy < ylo ? iy : ylo;
                yhi = iy > yhi ? iy : yhi;
            }
    if (ylo > yhi)
        ylo = 0, yhi = h->ny ? h->ny - 1 : 0;
    x.lo = fmin(0, h->x0), x.hi = h->x0 + h->dx * (double)h->nx;
    yval(p, h->yedge[ylo], &y.lo);
    yval(p, h->yedge[yhi + 1], &y.hi);
    if (y.hi <= y.lo)
        y.hi = y.lo + 1;
    frame(f, p, "plot heat", &x, &y, H + 8 + LEGEND_ROW, marks, n_marks);
    fputs("<g class=\"heat\">", f);
    for (size_t ix = 0; ix < h->nx; ix++)
        for (size_t iy = ylo; iy <= yhi; iy++) {
            double c = h->count[ix * h->ny + iy], y0, y1;
            if (c <= 0 || !yval(p, h->yedge[iy], &y0) || !yval(p, h->yedge[iy + 1], &y1))
                continue;
            double px0 = ax_map(&x, h->x0 + h->dx * (double)ix), px1 = ax_map(&x, h->x0 + h->dx * (double)(ix + 1));
            double py0 = ax_map(&y, y1), py1 = ax_map(&y, y0);
            char col[8];
            shade(c, max, col, sizeof col);
            fprintf(f, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\">"
                       "<title>%.0f</title></rect>",
                    px0, py0, fmax(0.5, px1 - px0), fmax(0.5, py1 - py0), col, c);
        }
    fputs("</g>\n", f);
    /* The shade scale: 1 to the largest count, log spaced, as a row of swatches. */
    fprintf(f, "<g class=\"legend scale\"><text x=\"%.1f\" y=\"%.1f\">requests per cell:</text>",
            LEFT, H + 8);
    for (int i = 0; i <= 5; i++) {
        double c = max > 1 ? pow(max, i / 5.0) : 1;
        char col[8], lab[32];
        shade(c, max, col, sizeof col);
        html_num(round(c), lab, sizeof lab);
        double sx = LEFT + 150 + 90.0 * i;
        fprintf(f,
                "<rect x=\"%.1f\" y=\"%.1f\" width=\"24\" height=\"12\" fill=\"%s\"/>"
                "<text x=\"%.1f\" y=\"%.1f\">%s</text>",
                sx, H - 2, col, sx + 28, H + 8, lab);
        if (max <= 1)
            break;
    }
    fputs("</g>\n</svg>\n", f);
}

void html_figure(FILE *f, const char *cls, const html_plot_t *p, const html_line_t *lines,
                 size_t n_lines, const html_mark_t *marks, size_t n_marks)
{
    if (cls)
        fprintf(f, "<figure class=\"%s\">\n", cls);
    else
        fputs("<figure>\n", f);
    html_plot(f, p, lines, n_lines, marks, n_marks);
    fputs("<figcaption>", f);
    html_esc(f, p->title);
    fputs("</figcaption></figure>\n", f);
}
