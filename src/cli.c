/* cli: to be written. */
#include "cli.h"
int bk_cli_main(int argc, char **argv) {
  (void)argc;
  (void)argv;
  return 0;
}
