package main

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"
)

// The scale-out engines for real: a single-node Slurm (munged, slurmctld,
// slurmd started here from a minimal slurm.conf in a temporary directory,
// stopped by their PIDs at the end) runs the shipped batch script
// deploy/slurm/limpid-shards.sbatch as `sbatch --array=0-7%2`, and GNU
// parallel runs the same 8 shards with -j2; each directory is merged and
// compared with the single run by SHA-256. Debian's slurm-wlm, munge and
// parallel are installed with apt-get when missing. Source: Slurm's
// job-array documentation (SLURM_ARRAY_TASK_ID, SLURM_ARRAY_TASK_COUNT;
// "%2" limits the tasks running at once) and GNU parallel's manual (-j,
// ::: arguments); the reference bytes are the single run's.
func TestScaleOutEngines(t *testing.T) {
	skipUnderRace(t)
	if testing.Short() {
		t.Skip("starts a Slurm cluster and GNU parallel (about 30 s): not with -short")
	}
	installEngines(t)
	dir := t.TempDir()
	bin := filepath.Join(dir, "limpid")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v: %s", err, out)
	}
	in, flags := planFixture(t, dir)
	plain := filepath.Join(dir, "plain.tif")
	planRun(t, append(append([]string{"restore"}, flags...), in, plain)...)
	pj := filepath.Join(dir, "scene.plan.json")
	planRun(t, append(append([]string{"plan"}, flags...), in, pj)...)
	want := fileSHA(t, plain)

	t.Run("slurm", func(t *testing.T) {
		env := startSlurm(t)
		tiles := filepath.Join(dir, "slurm-tiles")
		script, err := filepath.Abs("../../deploy/slurm/limpid-shards.sbatch")
		if err != nil {
			t.Fatal(err)
		}
		cmd := exec.Command("sbatch", "--parsable", "--array=0-7%2", "--chdir="+dir, "--output="+filepath.Join(dir, "shard-%a.log"),
			"--export=ALL,LIMPID="+bin, script, pj, in, tiles)
		cmd.Env = env
		out, err := cmd.CombinedOutput()
		if err != nil {
			t.Fatalf("sbatch: %v: %s", err, out)
		}
		job := strings.TrimSpace(strings.Split(string(out), ";")[0])
		waitSlurm(t, env, job)
		for i := 0; i < 8; i++ {
			b, _ := os.ReadFile(filepath.Join(dir, fmt.Sprintf("shard-%d.log", i)))
			if !strings.Contains(string(b), fmt.Sprintf("limpid: shard %d/8:", i)) {
				t.Errorf("array task %d did not run its shard; its log: %q", i, b)
			}
		}
		merged := filepath.Join(dir, "slurm.tif")
		planRun(t, "merge", tiles, merged)
		if got := fileSHA(t, merged); got != want {
			t.Fatalf("Slurm shards merged: sha256 %s, single run %s", got, want)
		}
	})

	t.Run("parallel", func(t *testing.T) {
		tiles := filepath.Join(dir, "parallel-tiles")
		cmd := exec.Command("parallel", "--will-cite", "-j2", bin, "restore", "--plan", pj, "--shard", "{}/8", in, tiles, ":::", "0", "1", "2", "3", "4", "5", "6", "7")
		if out, err := cmd.CombinedOutput(); err != nil {
			t.Fatalf("parallel: %v: %s", err, out)
		}
		merged := filepath.Join(dir, "parallel.tif")
		planRun(t, "merge", tiles, merged)
		if got := fileSHA(t, merged); got != want {
			t.Fatalf("GNU parallel shards merged: sha256 %s, single run %s", got, want)
		}
	})
}

func fileSHA(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// installEngines installs Debian's slurm-wlm, munge and parallel when a
// program is missing; without apt-get the test is skipped, loudly.
func installEngines(t *testing.T) {
	t.Helper()
	missing := false
	for _, p := range []string{"sbatch", "squeue", "slurmctld", "slurmd", "munged", "parallel"} {
		if _, err := exec.LookPath(p); err != nil {
			missing = true
		}
	}
	if !missing {
		return
	}
	if _, err := exec.LookPath("apt-get"); err != nil {
		t.Skip("!!! SKIPPED: Slurm/munge/GNU parallel are not installed and apt-get is unavailable: the scale-out engines are NOT tested here !!!")
	}
	install := func() ([]byte, error) {
		cmd := exec.Command("apt-get", "install", "-y", "--no-install-recommends", "slurm-wlm", "munge", "parallel")
		cmd.Env = append(os.Environ(), "DEBIAN_FRONTEND=noninteractive")
		return cmd.CombinedOutput()
	}
	if _, err := install(); err != nil {
		exec.Command("apt-get", "update").Run()
		if out, err := install(); err != nil {
			t.Fatalf("apt-get install slurm-wlm munge parallel: %v: %s", err, out)
		}
	}
}

// freePort is a TCP port nobody listens on now.
func freePort(t *testing.T) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// startSlurm starts munged, slurmctld and slurmd for one node (this host,
// all its CPUs) from a temporary directory and returns the environment
// for the Slurm commands; the daemons are stopped by PID at the end.
func startSlurm(t *testing.T) []string {
	t.Helper()
	d, err := os.MkdirTemp("", "limpid-slurm-")
	if err != nil {
		t.Fatal(err)
	}
	os.Chmod(d, 0o755) // munged wants its socket's directory reachable
	var pidFiles []string
	t.Cleanup(func() {
		for i := len(pidFiles) - 1; i >= 0; i-- {
			if b, err := os.ReadFile(pidFiles[i]); err == nil {
				if pid, err := strconv.Atoi(strings.TrimSpace(string(b))); err == nil {
					syscall.Kill(pid, syscall.SIGTERM)
				}
			}
		}
		time.Sleep(500 * time.Millisecond)
		os.RemoveAll(d)
	})
	key, err := os.ReadFile("/etc/munge/munge.key")
	if err != nil {
		// A key of our own (munge keys are random bytes, 32 to 1024).
		key = []byte(strings.Repeat("limpid-test-munge-key-0123456789", 4))
	}
	if err := os.WriteFile(filepath.Join(d, "munge.key"), key, 0o600); err != nil {
		t.Fatal(err)
	}
	sock := filepath.Join(d, "munge.sock")
	daemon := func(pidFile string, env []string, name string, args ...string) {
		t.Helper()
		pidFiles = append(pidFiles, pidFile)
		cmd := exec.Command(name, args...)
		cmd.Env = env
		if out, err := cmd.CombinedOutput(); err != nil {
			t.Fatalf("%s: %v: %s", name, err, out)
		}
		for i := 0; i < 50; i++ {
			if _, err := os.Stat(pidFile); err == nil {
				return
			}
			time.Sleep(100 * time.Millisecond)
		}
		t.Fatalf("%s wrote no PID file %s", name, pidFile)
	}
	daemon(filepath.Join(d, "munged.pid"), os.Environ(), "munged", "--force", "--socket="+sock, "--key-file="+filepath.Join(d, "munge.key"),
		"--pid-file="+filepath.Join(d, "munged.pid"), "--log-file="+filepath.Join(d, "munged.log"))
	host, _ := os.Hostname()
	host, _, _ = strings.Cut(host, ".")
	for _, s := range []string{"state", "spool"} {
		os.Mkdir(filepath.Join(d, s), 0o755)
	}
	conf := fmt.Sprintf(`ClusterName=limpidtest
SlurmctldHost=%[1]s(127.0.0.1)
AuthType=auth/munge
AuthInfo=socket=%[2]s
CredType=cred/munge
SlurmUser=root
SlurmdUser=root
SlurmctldPort=%[3]d
SlurmdPort=%[4]d
StateSaveLocation=%[5]s/state
SlurmdSpoolDir=%[5]s/spool
SlurmctldPidFile=%[5]s/slurmctld.pid
SlurmdPidFile=%[5]s/slurmd.pid
SlurmctldLogFile=%[5]s/slurmctld.log
SlurmdLogFile=%[5]s/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
MpiDefault=none
ReturnToService=2
SchedulerType=sched/builtin
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
JobCompType=jobcomp/none
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
NodeName=%[1]s NodeAddr=127.0.0.1 CPUs=%[6]d State=UNKNOWN
PartitionName=limpid Nodes=ALL Default=YES MaxTime=INFINITE State=UP
`, host, sock, freePort(t), freePort(t), d, runtime.NumCPU())
	confPath := filepath.Join(d, "slurm.conf")
	if err := os.WriteFile(confPath, []byte(conf), 0o644); err != nil {
		t.Fatal(err)
	}
	env := append(os.Environ(), "SLURM_CONF="+confPath)
	daemon(filepath.Join(d, "slurmctld.pid"), env, "slurmctld")
	daemon(filepath.Join(d, "slurmd.pid"), env, "slurmd")
	for i := 0; ; i++ {
		cmd := exec.Command("sinfo", "-h", "-o", "%t")
		cmd.Env = env
		out, _ := cmd.Output()
		if s := strings.TrimSpace(string(out)); s == "idle" {
			break
		}
		if i > 100 {
			logs, _ := os.ReadFile(filepath.Join(d, "slurmctld.log"))
			t.Fatalf("the Slurm node did not come up (sinfo: %q); slurmctld.log: %s", out, logs)
		}
		time.Sleep(200 * time.Millisecond)
	}
	return env
}

// waitSlurm polls squeue until job (an array) has left the queue, then
// checks that every task completed.
func waitSlurm(t *testing.T, env []string, job string) {
	t.Helper()
	deadline := time.Now().Add(3 * time.Minute)
	for {
		cmd := exec.Command("squeue", "-h", "-j", job)
		cmd.Env = env
		out, err := cmd.Output()
		if err == nil && strings.TrimSpace(string(out)) == "" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("Slurm job %s still queued after 3 minutes: %s", job, out)
		}
		time.Sleep(300 * time.Millisecond)
	}
	cmd := exec.Command("scontrol", "-o", "show", "job", job)
	cmd.Env = env
	out, _ := cmd.Output()
	for _, l := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		if l != "" && !strings.Contains(l, "JobState=COMPLETED") {
			t.Errorf("Slurm array task not completed: %s", l)
		}
	}
}

// runScript runs a shell script with args outside Slurm (no SLURM_*
// variables) and returns its combined output.
func runScript(path string, args ...string) (string, error) {
	cmd := exec.Command("bash", append([]string{path}, args...)...)
	for _, e := range os.Environ() {
		if !strings.HasPrefix(e, "SLURM_") {
			cmd.Env = append(cmd.Env, e)
		}
	}
	out, err := cmd.CombinedOutput()
	return string(out), err
}

func exitOf(err error) int {
	if ee, ok := err.(*exec.ExitError); ok {
		return ee.ExitCode()
	}
	if err != nil {
		return -1
	}
	return 0
}
