// The process: its id, its arguments and command line in UTF-8, its terminal.
#pragma once

#include <cstdio>
#include <string>
#include <vector>

namespace sprig::platform {

// This process's id (for unique temporary names).
unsigned long ProcessId();

// True when `stream` is a terminal (isatty; a console on Windows).
bool IsTerminal(std::FILE* stream);

// The program's arguments, UTF-8: argv itself on POSIX (its bytes are the file names as they
// are); on Windows the UTF-16 command line (GetCommandLineW, CommandLineToArgvW) converted,
// since argv holds the ANSI code page's approximation of anything outside it.
std::vector<std::string> Utf8Arguments(int argc, char** argv);

// Makes the console show UTF-8 output as such (SetConsoleOutputCP(CP_UTF8) on Windows;
// nothing to do on POSIX, where the terminal decides).
void UseUtf8Console();

// CPU time used so far, in seconds, by the whole process and by the calling thread
// (clock_gettime's CPUTIME clocks; GetProcessTimes and GetThreadTimes on Windows).
double ProcessCpuSeconds();
double ThreadCpuSeconds();

// The command line as run, arguments separated by spaces, for reports: /proc/self/cmdline on
// Linux, GetCommandLineW on Windows; empty where the system offers neither.
std::string CommandLine();

}  // namespace sprig::platform
