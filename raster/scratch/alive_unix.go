//go:build unix

package scratch

import "syscall"

// alive reports whether process pid exists: kill(pid, 0) sends nothing and
// fails with ESRCH only when there is no such process (EPERM: it exists but
// belongs to another user). Source: POSIX.1-2017 kill(), "If sig is 0 (the
// null signal), error checking is performed but no signal is actually sent".
func alive(pid int) bool {
	err := syscall.Kill(pid, 0)
	return err == nil || err == syscall.EPERM
}
