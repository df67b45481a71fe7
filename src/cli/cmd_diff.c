/* brume diff A.brv B.brv [--max-error E]: per channel max abs error, RMSE and PSNR. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "brume/brv.h"
#include "cli/cli.h"

static const char diff_help[] =
    "usage: brume diff A.brv B.brv [--max-error E]\n"
    "\n"
    "Compares two volumes of the same grid channel by channel, B against A, and prints for each\n"
    "channel the largest absolute difference, the root-mean-square difference (RMSE) and the\n"
    "peak signal-to-noise ratio PSNR = 20 log10(peak / RMSE) in dB, where the peak is the\n"
    "channel's range in A (max - min of A's decoded values); 'inf' when the channels are equal,\n"
    "'n/a' when A's channel is constant and B differs.\n"
    "Grids are comparable when kind, cells, bounds (or camera slice depths) and channel names\n"
    "agree; channels are matched by name.\n"
    "\n"
    "  --max-error E   fail (exit 4) when any channel's max abs difference exceeds E\n"
    "\n"
    "Exit status: 0 ok (within E); 4 over E, or the grids are not comparable; 1 a file is\n"
    "corrupt or not a volume; 2 a usage error; 3 a file cannot be read.\n";

static int open_one(const char *path, brv_volume **v)
{
    brv_result r = brv_open_file(path, NULL, v);
    if (r == BRV_OK) return BRM_EXIT_OK;
    if (r == BRV_E_IO) brm_cli_error("%s: cannot open or read the file", path);
    else brm_cli_error("%s: %s", path, brv_result_text(r));
    return r == BRV_E_IO || r == BRV_E_NOMEM ? BRM_EXIT_IO : BRM_EXIT_INPUT;
}

/* Why two grids cannot be compared, or NULL. */
static const char *not_comparable(const brv_volume *a, const brv_volume *b, char *why, size_t cap)
{
    const brv_grid_info *ga = brv_grid(a), *gb = brv_grid(b);
    if (ga->kind != gb->kind) return "the grid kinds differ";
    for (int k = 0; k < 3; k++)
        if (ga->cells[k] != gb->cells[k]) {
            snprintf(why, cap, "the cells differ: %u x %u x %u against %u x %u x %u", ga->cells[0], ga->cells[1],
                     ga->cells[2], gb->cells[0], gb->cells[1], gb->cells[2]);
            return why;
        }
    for (int k = 0; k < 3; k++)
        if (ga->bounds_min[k] != gb->bounds_min[k] || ga->bounds_max[k] != gb->bounds_max[k])
            return "the bounds differ";
    if (ga->kind == BRV_GRID_FRUSTUM)
        for (uint32_t k = 0; k <= ga->cells[2]; k++)
            if (ga->slice_depths[k] != gb->slice_depths[k]) return "the slice depths differ";
    if (ga->channel_count != gb->channel_count) {
        snprintf(why, cap, "A has %u channels, B has %u", ga->channel_count, gb->channel_count);
        return why;
    }
    for (uint32_t c = 0; c < ga->channel_count; c++)
        if (brv_channel_find(b, brv_channel(a, c)->name) < 0) {
            snprintf(why, cap, "B has no channel '%s'", brv_channel(a, c)->name);
            return why;
        }
    return NULL;
}

int brm_cmd_diff(int argc, char **argv)
{
    const char *pa = NULL, *pb = NULL, *emax = NULL;
    for (int i = 1; i < argc; i++) {
        int k;
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(diff_help, stdout);
            return BRM_EXIT_OK;
        }
        if ((k = brm_cli_opt("diff", argc, argv, &i, "--max-error", &emax)) != 0) {
            if (k < 0) return BRM_EXIT_USAGE;
            continue;
        }
        if (argv[i][0] == '-' && argv[i][1] != '\0') return brm_cli_usage("diff", "unknown option '%s'", argv[i]);
        if (!pa) pa = argv[i];
        else if (!pb) pb = argv[i];
        else return brm_cli_usage("diff", "two volume files, A and B ('%s' is a third)", argv[i]);
    }
    if (!pa || !pb) return brm_cli_usage("diff", "give two volume files, A.brv and B.brv");
    double bound = INFINITY;
    if (emax && (!brm_cli_parse_double(emax, &bound) || bound < 0))
        return brm_cli_usage("diff", "--max-error '%s': expected a number >= 0", emax);
    brv_volume *a = NULL, *b = NULL;
    int rc = open_one(pa, &a);
    if (rc == BRM_EXIT_OK) rc = open_one(pb, &b);
    char why[256];
    const char *nc = rc == BRM_EXIT_OK ? not_comparable(a, b, why, sizeof why) : NULL;
    if (nc) {
        printf("not comparable: %s\n", nc);
        brm_cli_error("%s and %s are not comparable: %s", pa, pb, nc);
        rc = BRM_EXIT_CHECK;
    }
    float *va = NULL, *vb = NULL;
    size_t n = rc == BRM_EXIT_OK ? brv_channel_size(a) : 0;
    if (rc == BRM_EXIT_OK) {
        va = malloc(n * sizeof *va);
        vb = malloc(n * sizeof *vb);
        if (!va || !vb) {
            brm_cli_error("out of memory for two channels of %zu values", n);
            rc = BRM_EXIT_IO;
        }
    }
    int over = 0;
    if (rc == BRM_EXIT_OK) {
        printf("%-16s %14s %14s %10s\n", "channel", "max_abs", "rmse", "psnr_db");
        for (uint32_t c = 0; c < brv_grid(a)->channel_count && rc == BRM_EXIT_OK; c++) {
            const char *name = brv_channel(a, c)->name;
            brv_result r = brv_decode_channel(a, c, va, n);
            const char *which = pa;
            if (r == BRV_OK) {
                which = pb;
                r = brv_decode_channel(b, (uint32_t)brv_channel_find(b, name), vb, n);
            }
            if (r != BRV_OK) {
                brm_cli_error("%s: channel '%s': %s", which, name, brv_result_text(r));
                rc = r == BRV_E_NOMEM ? BRM_EXIT_IO : BRM_EXIT_INPUT;
                break;
            }
            double mx = 0, ss = 0, lo = INFINITY, hi = -INFINITY;
            for (size_t i = 0; i < n; i++) {
                double d = fabs((double)vb[i] - (double)va[i]);
                if (d > mx) mx = d;
                ss += d * d;
                if (va[i] < lo) lo = va[i];
                if (va[i] > hi) hi = va[i];
            }
            double rmse = sqrt(ss / (double)n), peak = hi - lo;
            char psnr[32];
            if (rmse == 0) snprintf(psnr, sizeof psnr, "inf");
            else if (peak <= 0) snprintf(psnr, sizeof psnr, "n/a");
            else snprintf(psnr, sizeof psnr, "%.2f", 20.0 * log10(peak / rmse));
            int bad = mx > bound;
            over |= bad;
            printf("%-16s %14.6g %14.6g %10s%s\n", name, mx, rmse, psnr, bad ? "  over --max-error" : "");
        }
    }
    if (rc == BRM_EXIT_OK && over) {
        brm_cli_error("a channel differs by more than --max-error %g", bound);
        rc = BRM_EXIT_CHECK;
    }
    free(va);
    free(vb);
    brv_free(a);
    brv_free(b);
    return rc;
}
