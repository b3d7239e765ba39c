package main

import (
	"os"
	"runtime"
	"strconv"
	"strings"
)

// resourceEnv turns on a line per scored file with the process's resident
// memory, goroutines and open file descriptors, for the soak test
// (cmd/heftbench/soak.sh). It is for developers and not in the help.
const resourceEnv = "HEFT_DEBUG_RESOURCES"

// logResources writes "heft resources: <label> rss_kib=… goroutines=…
// fds=…" to stderr when HEFT_DEBUG_RESOURCES=1, from /proc/self on Linux.
func logResources(env *Env, label string) {
	if os.Getenv(resourceEnv) != "1" {
		return
	}
	rss := "?"
	if b, err := os.ReadFile("/proc/self/status"); err == nil {
		for _, line := range strings.Split(string(b), "\n") {
			if v, ok := strings.CutPrefix(line, "VmRSS:"); ok {
				rss = strings.TrimSuffix(strings.TrimSpace(v), " kB")
			}
		}
	}
	fds := "?"
	if ents, err := os.ReadDir("/proc/self/fd"); err == nil {
		fds = strconv.Itoa(len(ents) - 1) // less the descriptor reading the directory
	}
	env.Stderr.Write([]byte("heft resources: " + label + " rss_kib=" + rss +
		" goroutines=" + strconv.Itoa(runtime.NumGoroutine()) + " fds=" + fds + "\n"))
}
