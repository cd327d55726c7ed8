// Command peakrss runs a command and prints its peak resident memory
// (getrusage ru_maxrss of the child), for scripts/bench.sh; with -faults
// first, the child's minor page faults instead (ru_minflt).
package main

import (
	"fmt"
	"os"
	"os/exec"
	"syscall"
)

func main() {
	args := os.Args[1:]
	faults := len(args) > 0 && args[0] == "-faults"
	if faults {
		args = args[1:]
	}
	if len(args) == 0 {
		fmt.Fprintln(os.Stderr, "usage: peakrss [-faults] COMMAND [ARG...]")
		os.Exit(2)
	}
	cmd := exec.Command(args[0], args[1:]...)
	cmd.Stdout, cmd.Stderr = os.Stderr, os.Stderr
	err := cmd.Run()
	ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage)
	if !ok {
		fmt.Fprintln(os.Stderr, "peakrss: no resource usage on this system")
		os.Exit(1)
	}
	if faults {
		fmt.Println(ru.Minflt)
	} else {
		fmt.Println(ru.Maxrss) // KiB on Linux
	}
	if err != nil {
		os.Exit(1)
	}
}
