/* peakrss: run a command, write its peak resident set size (KiB) to OUTFILE and
 * exit with the command's status.
 *
 * Why a C launcher and not os.wait4 in the Python driver: on Linux, exec() seeds
 * the new program's ru_maxrss with the high-water mark of the process it replaces,
 * so anything started by Python reports at least the Python's own ~10 MiB (or far
 * more once numpy is loaded). Started from this tiny program the floor is ~1 MiB.
 *
 *   peakrss OUTFILE COMMAND [ARG...]
 */
#define _DEFAULT_SOURCE
#include <stdio.h>
#include <sys/resource.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <unistd.h>

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: peakrss OUTFILE COMMAND [ARG...]\n");
        return 2;
    }
    pid_t pid = fork();
    if (pid < 0) {
        perror("peakrss: fork");
        return 125;
    }
    if (pid == 0) {
        execvp(argv[2], argv + 2);
        perror(argv[2]);
        _exit(127);
    }
    int status;
    struct rusage ru;
    if (wait4(pid, &status, 0, &ru) < 0) {
        perror("peakrss: wait4");
        return 125;
    }
    FILE *out = fopen(argv[1], "w");
    if (!out || fprintf(out, "%ld\n", ru.ru_maxrss) < 0 || fclose(out) != 0) {
        perror(argv[1]);
        return 125;
    }
    if (WIFEXITED(status))
        return WEXITSTATUS(status);
    return 128 + WTERMSIG(status);
}
