/* One entry point per command; each parses its own options (argv[0] is the command name). */
#ifndef BL_CLI_COMMANDS_H
#define BL_CLI_COMMANDS_H

int cmd_run(int argc, char **argv);
int cmd_power(int argc, char **argv);
int cmd_fit(int argc, char **argv);
int cmd_check(int argc, char **argv);
int cmd_simulate(int argc, char **argv);
int cmd_predict(int argc, char **argv);
int cmd_scan(int argc, char **argv);

#endif
