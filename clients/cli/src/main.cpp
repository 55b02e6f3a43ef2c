// main.cpp: the `pitchwire` command.
#include "cli.h"

int main(int argc, char** argv) { return pitchwire::cli::run(argc, argv); }
