/* brume verify FILE.brv: structure and every checksum; exit 0 sound, 4 any fault, 3 unreadable. */
#include <stdio.h>
#include <string.h>

#include "brume/brv.h"
#include "cli/cli.h"

static const char verify_help[] =
    "usage: brume verify FILE.brv\n"
    "\n"
    "Checks a volume's structure (header, tables, brick ranges, their CRC-32s) and then every\n"
    "brick: its stored bytes' CRC-32, its zstd frame and content checksum, and its payload.\n"
    "\n"
    "Exit status: 0 the file is sound; 4 any fault (corrupt, truncated, not a volume at all);\n"
    "3 the file cannot be opened or read; 2 a usage error.\n";

int brm_cmd_verify(int argc, char **argv)
{
    const char *path = NULL;
    for (int i = 1; i < argc; i++) {
        if (brm_cli_flag(argv, i, "--help") || brm_cli_flag(argv, i, "-h")) {
            fputs(verify_help, stdout);
            return BRM_EXIT_OK;
        }
        if (argv[i][0] == '-' && argv[i][1] != '\0') return brm_cli_usage("verify", "unknown option '%s'", argv[i]);
        if (path) return brm_cli_usage("verify", "one volume file at a time ('%s' and '%s' given)", path, argv[i]);
        path = argv[i];
    }
    if (!path) return brm_cli_usage("verify", "which volume? give FILE.brv");
    brv_volume *v = NULL;
    brv_result r = brv_open_file(path, NULL, &v);
    if (r == BRV_E_IO || r == BRV_E_NOMEM) {
        brm_cli_error("%s: %s", path, r == BRV_E_IO ? "cannot open or read the file" : brv_result_text(r));
        return BRM_EXIT_IO;
    }
    if (r != BRV_OK) {
        printf("%s: FAULT: %s\n", path, brv_result_text(r));
        brm_cli_error("%s: %s; the file is damaged or not a brume volume: bake it again", path, brv_result_text(r));
        return BRM_EXIT_CHECK;
    }
    uint32_t bad = UINT32_MAX;
    r = brv_verify(v, &bad);
    const brv_grid_info *g = brv_grid(v);
    int rc = BRM_EXIT_OK;
    if (r == BRV_E_NOMEM) {
        brm_cli_error("%s: %s", path, brv_result_text(r));
        rc = BRM_EXIT_IO;
    } else if (r != BRV_OK) {
        uint32_t o[3] = {0}, e[3] = {0};
        brv_brick_extent(v, bad, o, e);
        printf("%s: FAULT: brick %u (cells %u..%u, %u..%u, %u..%u): %s\n", path, bad, o[0], o[0] + e[0] - 1, o[1],
               o[1] + e[1] - 1, o[2], o[2] + e[2] - 1, brv_result_text(r));
        brm_cli_error("%s: brick %u: %s; the file is damaged: bake it again", path, bad, brv_result_text(r));
        rc = BRM_EXIT_CHECK;
    } else {
        printf("%s: ok: %u bricks, %u channels, %llu bytes; header, tables and every brick checksum sound\n", path,
               g->brick_count, g->channel_count, (unsigned long long)g->file_size);
    }
    brv_free(v);
    return rc;
}
