package testkit

import (
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// NATSServer is a real nats-server process (built from the module this
// repository requires), for tests that stop, kill, pause and restart the
// broker. It listens on loopback on a fixed port across restarts and keeps
// its JetStream store in the test's temporary directory.
type NATSServer struct {
	t     testing.TB
	bin   string
	args  []string
	Port  int
	Store string

	mu  sync.Mutex
	cmd *exec.Cmd
	log *Buffer
}

var (
	buildOnce sync.Once
	builtBin  string
	buildErr  error
)

// natsServerBinary builds nats-server once per test binary.
func natsServerBinary() (string, error) {
	buildOnce.Do(func() {
		dir, err := os.MkdirTemp("", "tallyd-nats-server")
		if err != nil {
			buildErr = err
			return
		}
		builtBin = filepath.Join(dir, "nats-server")
		out, err := exec.Command("go", "build", "-o", builtBin, "github.com/nats-io/nats-server/v2").CombinedOutput()
		if err != nil {
			buildErr = fmt.Errorf("build nats-server: %v\n%s", err, out)
		}
	})
	return builtBin, buildErr
}

// StartNATSServer starts nats-server with JetStream on a free loopback port;
// extra are more command-line arguments (for example "--user", "u",
// "--pass", "p"). The process is killed when the test ends.
func StartNATSServer(t testing.TB, jetStream bool, extra ...string) *NATSServer {
	t.Helper()
	bin, err := natsServerBinary()
	if err != nil {
		t.Fatal(err)
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := l.Addr().(*net.TCPAddr).Port
	l.Close()
	s := &NATSServer{t: t, bin: bin, Port: port, Store: t.TempDir()}
	s.args = []string{"-a", "127.0.0.1", "-p", fmt.Sprint(port)}
	if jetStream {
		s.args = append(s.args, "-js", "-sd", s.Store)
	}
	s.args = append(s.args, extra...)
	s.Start()
	t.Cleanup(s.Kill)
	return s
}

// URL is the server's client URL.
func (s *NATSServer) URL() string { return fmt.Sprintf("nats://127.0.0.1:%d", s.Port) }

// Start starts the process (again) and waits until it accepts connections.
func (s *NATSServer) Start() {
	s.t.Helper()
	s.mu.Lock()
	s.log = &Buffer{}
	cmd := exec.Command(s.bin, s.args...)
	cmd.Stdout, cmd.Stderr = s.log, s.log
	if err := cmd.Start(); err != nil {
		s.mu.Unlock()
		s.t.Fatal(err)
	}
	s.cmd = cmd
	s.mu.Unlock()
	WaitFor(s.t, 20*time.Second, "nats-server to accept connections", func() bool {
		c, err := net.DialTimeout("tcp", fmt.Sprintf("127.0.0.1:%d", s.Port), 200*time.Millisecond)
		if err != nil {
			return false
		}
		c.Close()
		return strings.Contains(s.log.String(), "Server is ready")
	})
}

// Stop ends the process with SIGTERM (a clean shutdown) and waits for it.
func (s *NATSServer) Stop() { s.signalWait(syscall.SIGTERM) }

// Kill ends the process with SIGKILL and waits for it; safe twice.
func (s *NATSServer) Kill() { s.signalWait(syscall.SIGKILL) }

// Pause freezes the process (SIGSTOP): connections stay open, nothing is
// answered. Resume thaws it.
func (s *NATSServer) Pause() { s.signal(syscall.SIGSTOP) }

// Resume thaws a paused process (SIGCONT).
func (s *NATSServer) Resume() { s.signal(syscall.SIGCONT) }

// Log is what the server printed since it last started.
func (s *NATSServer) Log() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.log.String()
}

func (s *NATSServer) signal(sig syscall.Signal) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.cmd != nil && s.cmd.ProcessState == nil {
		_ = s.cmd.Process.Signal(sig)
	}
}

func (s *NATSServer) signalWait(sig syscall.Signal) {
	s.mu.Lock()
	cmd := s.cmd
	s.cmd = nil
	s.mu.Unlock()
	if cmd == nil {
		return
	}
	_ = cmd.Process.Signal(syscall.SIGCONT) // a paused process cannot act on SIGTERM
	_ = cmd.Process.Signal(sig)
	_ = cmd.Wait()
}
