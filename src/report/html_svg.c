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

static double xval(const html_plot_t *p, double x)
{
    return p->xaxis == HTML_X_SPECTRUM ? -log10(1 - fmin(x, 99.9999) / 100) : x;
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
            if (!yval(p, l[i].y[k], &yv))
                continue;
            double xv = xval(p, l[i].x[k]);
            x->lo = fmin(x->lo, xv), x->hi = fmax(x->hi, xv);
            y->lo = fmin(y->lo, yv), y->hi = fmax(y->hi, yv);
        }
    if (x->lo > x->hi)
        x->lo = 0, x->hi = 1;
    if (y->lo > y->hi)
        y->lo = 0, y->hi = 1;
    if (p->xaxis == HTML_X_SPECTRUM)
        x->lo = 0, x->hi = fmax(2, ceil(x->hi - 1e-9));
    else
        x->lo = fmin(0, x->lo);
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

static void tick_label(double v, char *buf, size_t cap)
{
    if (fabs(v) >= 1e4 || (fabs(v) < 1e-3 && v != 0))
        snprintf(buf, cap, "%.0e", v);
    else
        snprintf(buf, cap, "%g", fabs(v) < 1e-12 ? 0 : v);
}

static void yticks(FILE *f, const html_plot_t *p, const axis_t *y)
{
    double step = p->ylog ? 1 : nice_step(y->hi - y->lo);
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
    static const char *const spectrum[] = {"p0", "p90", "p99", "p99.9", "p99.99", "p99.999"};
    bool sp = p->xaxis == HTML_X_SPECTRUM;
    double step = sp ? 1 : nice_step(x->hi - x->lo);
    for (double v = ceil(x->lo / step) * step; v <= x->hi + 1e-9 * step; v += step) {
        double px = ax_map(x, v);
        char lab[32];
        if (sp)
            snprintf(lab, sizeof lab, "%s", spectrum[(int)fmin(v, 5)]);
        else
            tick_label(v, lab, sizeof lab);
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
        if (!yval(p, l->y[k], &yv)) {
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
        if (yval(p, l->y[k], &yv) && (alone || k % every == (size_t)l->style % every))
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

void html_plot(FILE *f, const html_plot_t *p, const html_line_t *lines, size_t n_lines,
               const html_mark_t *marks, size_t n_marks)
{
    axis_t x = {.px0 = LEFT, .px1 = W - RIGHT}, y = {.px0 = H - BOTTOM, .px1 = TOP, .log = p->ylog};
    ranges(p, lines, n_lines, &x, &y);
    double total_h = H + 8 + LEGEND_ROW * (double)((n_lines + LEGEND_COLS - 1) / LEGEND_COLS);
    fprintf(f,
            "<svg class=\"plot\" xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 %.0f %.0f\" "
            "role=\"img\" aria-label=\"",
            W, total_h);
    html_esc(f, p->title);
    fputs("\">\n<title>", f);
    html_esc(f, p->title);
    fputs("</title>\n<g class=\"axis y\">", f);
    yticks(f, p, &y);
    fprintf(f,
            "<text class=\"axis-label\" transform=\"translate(16 %.1f) rotate(-90)\" "
            "text-anchor=\"middle\">",
            (TOP + H - BOTTOM) / 2);
    html_esc(f, p->ylabel);
    fputs("</text></g>\n<g class=\"axis x\">", f);
    xticks(f, p, &x);
    fprintf(f, "<text class=\"axis-label\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">",
            (LEFT + W - RIGHT) / 2, H - 8);
    html_esc(f, p->xlabel);
    fprintf(f,
            "</text></g>\n<rect class=\"frame\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" "
            "height=\"%.1f\"/>\n",
            LEFT, TOP, W - LEFT - RIGHT, H - BOTTOM - TOP);
    /* Labels that would run into the one before them go one row lower (three rows; about 6.5 px
     * per character at the style sheet's size); marks outside the x range are left out. */
    double row_end[3] = {-1e9, -1e9, -1e9};
    for (size_t i = 0; i < n_marks; i++) {
        double px = ax_map(&x, xval(p, marks[i].x));
        if (!(px >= LEFT - 0.5 && px <= W - RIGHT + 0.5))
            continue;
        int row = 0;
        while (row < 2 && px < row_end[row])
            row++;
        row_end[row] = px + 8 + 6.5 * (double)strlen(marks[i].label ? marks[i].label : "");
        fprintf(f,
                "<g class=\"mark\"><line x1=\"%.1f\" x2=\"%.1f\" y1=\"%.1f\" y2=\"%.1f\"/>"
                "<text x=\"%.1f\" y=\"%.1f\">",
                px, px, TOP, H - BOTTOM, px + 3, TOP - 6 + 14.0 * row);
        html_esc(f, marks[i].label);
        fputs("</text></g>\n", f);
    }
    for (size_t i = 0; i < n_lines; i++)
        line(f, p, &lines[i], &x, &y);
    legend(f, lines, n_lines);
    fputs("</svg>\n", f);
}
