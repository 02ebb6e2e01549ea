/* SPDX-License-Identifier: MIT
 * The splitlot executable: hands the arguments to the command layer.
 */
#include "cli.h"

int main(int argc, char **argv) { return cli_main(argc, argv); }
