package outbox

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"syscall"
	"testing"
	"time"

	"tallyd/internal/testkit"
)

// Child processes: with OUTBOX_TEST_CHILD set, the test binary runs one of
// the children below on the outbox at OUTBOX_TEST_PATH instead of the tests.
const (
	envChild = "OUTBOX_TEST_CHILD"
	envPath  = "OUTBOX_TEST_PATH"
)

// crashDataBytes is the size of the events the crash child writes.
const crashDataBytes = 200

func TestMain(m *testing.M) {
	switch os.Getenv(envChild) {
	case "":
		os.Exit(m.Run())
	case "append":
		os.Exit(appendChild(os.Getenv(envPath)))
	case "hold":
		os.Exit(holdChild(os.Getenv(envPath)))
	default:
		fmt.Fprintf(os.Stderr, "unknown %s %q\n", envChild, os.Getenv(envChild))
		os.Exit(2)
	}
}

// appendChild appends the event stream in batches of 1 to 7 forever,
// continuing after what the file holds, and prints "<seq>" after each
// Append returns: the last Seq the parent may rely on.
func appendChild(path string) int {
	ob, err := Open(path, Options{Now: clock})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	next := uint64(ob.Stats().Pending) + 1 // the stream is never deleted from
	for {
		n := 1 + next%7
		out, err := ob.Append(events(next, next+n-1, crashDataBytes))
		if err != nil {
			fmt.Fprintln(os.Stderr, err)
			return 1
		}
		if out[0].Seq != next {
			fmt.Fprintf(os.Stderr, "Seq %d, want %d\n", out[0].Seq, next)
			return 1
		}
		next += n
		if _, err := fmt.Printf("%d\n", next-1); err != nil {
			return 1
		}
	}
}

// holdChild opens the outbox, prints "open" and keeps it open until its
// standard input is closed.
func holdChild(path string) int {
	ob, err := Open(path, Options{})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	fmt.Println("open")
	_, _ = io.Copy(io.Discard, os.Stdin)
	if err := ob.Close(); err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	return 0
}

// child is the test binary running one of the children on path; lines
// receives its standard output line by line and is closed at its end.
type child struct {
	cmd    *exec.Cmd
	stdin  io.WriteCloser
	lines  chan string
	stderr testkit.Buffer
}

func startChild(t *testing.T, kind, path string) *child {
	t.Helper()
	c := &child{cmd: exec.Command(os.Args[0]), lines: make(chan string, 1024)}
	c.cmd.Env = append(os.Environ(), envChild+"="+kind, envPath+"="+path)
	c.cmd.Stderr = &c.stderr
	out, err := c.cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if c.stdin, err = c.cmd.StdinPipe(); err != nil {
		t.Fatal(err)
	}
	if err := c.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = c.cmd.Process.Kill() })
	go func() {
		defer close(c.lines)
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			c.lines <- sc.Text()
		}
	}()
	return c
}

// TestCrashKeepsAPrefix kills a process that appends as fast as it can
// with SIGKILL, a few times over, and checks after each kill that the file
// opens and holds exactly the events 1..n, intact, with n at least the last
// Seq an Append had returned. (A process crash: the kernel's page cache
// survives, a power cut is not simulated.)
func TestCrashKeepsAPrefix(t *testing.T) {
	path := filepath.Join(t.TempDir(), "outbox.db")
	var last uint64
	for round := range 3 {
		c := startChild(t, "append", path)
		// Let it run past the last round's end, then kill it at a
		// different moment each round.
		deadline := time.After(20 * time.Second)
		returned := last // the last Seq the child said Append returned
		for target := last + 200; returned < target; {
			select {
			case l, ok := <-c.lines:
				if !ok {
					t.Fatalf("round %d: child ended early; stderr:\n%s", round, c.stderr.String())
				}
				if returned, _ = strconv.ParseUint(l, 10, 64); returned == 0 {
					t.Fatalf("round %d: child printed %q", round, l)
				}
			case <-deadline:
				t.Fatalf("round %d: child reported fewer than %d records in 20 s", round, target-last)
			}
		}
		time.Sleep(time.Duration(round*7) * time.Millisecond)
		if err := c.cmd.Process.Signal(syscall.SIGKILL); err != nil {
			t.Fatal(err)
		}
		// Every line printed before the kill is a returned Append.
		for l := range c.lines {
			if s, err := strconv.ParseUint(l, 10, 64); err == nil {
				returned = s
			}
		}
		err := c.cmd.Wait()
		var exit *exec.ExitError
		if !errors.As(err, &exit) || exit.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
			t.Fatalf("round %d: child ended with %v, want killed; stderr:\n%s", round, err, c.stderr.String())
		}

		ob, err := Open(path, Options{Now: clock})
		if err != nil {
			t.Fatalf("round %d: reopen after SIGKILL: %v", round, err)
		}
		all := readAll(t, ob)
		if uint64(len(all)) < returned {
			t.Fatalf("round %d: %d records after the kill, but Append had returned Seq %d", round, len(all), returned)
		}
		for i, r := range all {
			if r.Seq != uint64(i+1) {
				t.Fatalf("round %d: record %d has Seq %d, want %d (not a prefix)", round, i, r.Seq, i+1)
			}
			checkEvent(t, r, crashDataBytes)
		}
		if st := ob.Stats(); st.Pending != int64(len(all)) {
			t.Fatalf("round %d: Pending %d, but %d records read", round, st.Pending, len(all))
		}
		t.Logf("round %d: killed after Seq %d returned; %d records in the file", round, returned, len(all))
		last = uint64(len(all))
		if err := ob.Close(); err != nil {
			t.Fatal(err)
		}
	}
}

// TestInUse opens the outbox in another process and checks that Open here
// fails after the lock timeout with an error naming the file, then succeeds
// once the other process has closed it.
func TestInUse(t *testing.T) {
	path := filepath.Join(t.TempDir(), "outbox.db")
	c := startChild(t, "hold", path)
	select {
	case l := <-c.lines:
		if l != "open" {
			t.Fatalf("child printed %q; stderr:\n%s", l, c.stderr.String())
		}
	case <-time.After(20 * time.Second):
		t.Fatal("child did not open the outbox in 20 s")
	}
	start := time.Now()
	ob, err := Open(path, Options{})
	if err == nil {
		ob.Close()
		t.Fatal("second Open succeeded")
	}
	took := time.Since(start)
	want := fmt.Sprintf("outbox %s is in use by another process (no lock after 1s): timeout", path)
	if !errors.Is(err, ErrInUse) || err.Error() != want {
		t.Fatalf("Open error = %v, want %q", err, want)
	}
	// bbolt retries the lock every 50 ms until the timeout has passed.
	if took < lockTimeout-100*time.Millisecond || took > lockTimeout+5*time.Second {
		t.Errorf("Open failed after %v, want about %v", took, lockTimeout)
	}
	if err := c.stdin.Close(); err != nil {
		t.Fatal(err)
	}
	if err := c.cmd.Wait(); err != nil {
		t.Fatalf("child: %v; stderr:\n%s", err, c.stderr.String())
	}
	ob, err = Open(path, Options{})
	if err != nil {
		t.Fatalf("Open after the other process closed: %v", err)
	}
	if err := ob.Close(); err != nil {
		t.Fatal(err)
	}
}
