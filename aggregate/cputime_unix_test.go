//go:build unix

package aggregate

import "syscall"

// cpuSeconds is the process's user and system CPU time, which a loaded
// machine inflates less than wall time.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) != nil {
		return 0
	}
	return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
}
