/* bandlink fit (placeholder until its issue lands). */
#include "cli_common.h"
#include "commands.h"

int cmd_fit(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "bandlink: error: 'fit' is not built yet\n");
    return CLI_EXIT_FAILURE;
}
