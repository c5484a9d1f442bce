/* cmd_help: `precess help [COMMAND]`: the list of commands, or one
 * command's usage. Not the manual (docs/ and the man page). */
#include "cli.h"

#include <stdio.h>
#include <string.h>

int cmd_help(int argc, char **argv) {
    if (argc >= 2) {
        const cli_command *c = cli_find(argv[1]);
        if (!c) {
            fprintf(stderr, "precess help: unknown command '%s'\n", argv[1]);
            return CLI_USAGE;
        }
        fputs(c->usage, stdout);
        return CLI_OK;
    }
    size_t n;
    const cli_command *cs = cli_commands(&n);
    printf("precess %s: plans, runs, records and reduces prepolarized low-field NMR shots\n\n"
           "usage: precess COMMAND [ARGS]\n\ncommands:\n", PRECESS_VERSION);
    for (size_t i = 0; i < n; i++) printf("  %-10s %s\n", cs[i].name, cs[i].summary);
    printf("\n'precess help COMMAND' shows a command's usage; 'precess --version' the "
           "version.\nExit status: 0 ok, 1 runtime failure, 2 bad plan or usage, "
           "3 interrupted, 4 hardware fault.\n");
    return CLI_OK;
}
