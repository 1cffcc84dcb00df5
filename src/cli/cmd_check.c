/* bandlink check (placeholder until its issue lands). */
#include "cli_common.h"
#include "commands.h"

int cmd_check(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "bandlink: error: 'check' is not built yet\n");
    return CLI_EXIT_FAILURE;
}
