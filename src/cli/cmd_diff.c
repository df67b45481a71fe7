/* Placeholder: this command is being built; see its issue. */
#include <stdio.h>

#include "cli/cli.h"

int brm_cmd_diff(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    brm_cli_error("'diff' is not implemented yet");
    return BRM_EXIT_IO;
}
