// Command peakrss runs a command and prints its peak resident memory
// (getrusage ru_maxrss of the child), for scripts/bench.sh.
package main

import (
	"fmt"
	"os"
	"os/exec"
	"syscall"
)

func main() {
	if len(os.Args) < 2 {
		fmt.Fprintln(os.Stderr, "usage: peakrss COMMAND [ARG...]")
		os.Exit(2)
	}
	cmd := exec.Command(os.Args[1], os.Args[2:]...)
	cmd.Stdout, cmd.Stderr = os.Stderr, os.Stderr
	err := cmd.Run()
	ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage)
	if !ok {
		fmt.Fprintln(os.Stderr, "peakrss: no resource usage on this system")
		os.Exit(1)
	}
	fmt.Println(ru.Maxrss) // KiB on Linux
	if err != nil {
		os.Exit(1)
	}
}
