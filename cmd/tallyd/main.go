// Command tallyd counts people and vehicles in camera streams and recordings
// and publishes count and dwell events to NATS.
//
//	tallyd run -c site.yaml        daemon until SIGINT/SIGTERM
//	tallyd replay -c site.yaml     process recorded and generated sources to their end
//	tallyd check -c site.yaml      dry run: check the file, open every source
//	tallyd synth -c site.yaml ...  write a generated scene as video + ground truth
//	tallyd listen                  print events from NATS
//	tallyd track ...               the tracker alone over a detections file
//	tallyd score ...               tracking metrics against ground truth
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"syscall"

	"tallyd/internal/config"
)

// Exit codes.
const (
	exitOK       = 0
	exitFailed   = 1 // a failure while running
	exitBadInput = 2 // bad flags, bad site file, unreadable input: nothing started
)

type command struct {
	name, summary string
	run           func(ctx context.Context, args []string, stdout, stderr io.Writer) error
}

var commands = []command{
	{"run", "run the daemon on a site file until SIGINT/SIGTERM", cmdRun},
	{"replay", "process recorded and generated sources to their end and print the counts", cmdReplay},
	{"check", "check a site file and open every source without starting anything", cmdCheck},
	{"synth", "write a generated scene as a video file with its ground truth", cmdSynth},
	{"listen", "subscribe to tallyd events on NATS and print them", cmdListen},
	{"track", "run the tracker alone over a detections file (MOTChallenge text format)", cmdTrack},
	{"score", "score tracks against ground truth: CLEAR MOT, IDF1, HOTA", cmdScore},
}

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := realMain(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

func realMain(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage(stdout)
		if len(args) == 0 {
			return exitBadInput
		}
		return exitOK
	}
	for _, c := range commands {
		if c.name != args[0] {
			continue
		}
		err := c.run(ctx, args[1:], stdout, stderr)
		switch {
		case err == nil:
			return exitOK
		case errors.Is(err, flag.ErrHelp):
			return exitOK
		case errors.Is(err, errUsage) || errors.Is(err, config.ErrInvalid):
			fmt.Fprintf(stderr, "tallyd %s: %v\n", c.name, err)
			return exitBadInput
		default:
			fmt.Fprintf(stderr, "tallyd %s: %v\n", c.name, err)
			return exitFailed
		}
	}
	fmt.Fprintf(stderr, "tallyd: unknown command %q\n\n", args[0])
	usage(stderr)
	return exitBadInput
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "tallyd counts line crossings and zone dwell in video and publishes events to NATS.")
	fmt.Fprintln(w, "\nUsage: tallyd COMMAND [flags]   (tallyd COMMAND --help for its flags)")
	fmt.Fprintln(w, "\nCommands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nExit codes: 0 done, 1 failed while running, 2 bad input (nothing started).")
}

// errUsage marks bad command-line input (exit code 2).
var errUsage = errors.New("usage")

func usageErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{errUsage}, args...)...)
}

// newFlags makes a flag set that prints its usage to stdout on --help and
// returns errors instead of exiting.
func newFlags(name, synopsis string, stdout io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	fs.Usage = func() {
		fmt.Fprintf(stdout, "Usage: tallyd %s\n\nFlags:\n", synopsis)
		fs.SetOutput(stdout)
		fs.PrintDefaults()
		fs.SetOutput(io.Discard)
	}
	return fs
}

func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			fs.Usage()
			return err
		}
		return usageErr("%v (see tallyd %s --help)", err, fs.Name())
	}
	if fs.NArg() > 0 {
		return usageErr("unexpected argument %q (see tallyd %s --help)", fs.Arg(0), fs.Name())
	}
	return nil
}

// loadConfig reads the site file named by -c.
func loadConfig(path string) (*config.Config, error) {
	if path == "" {
		return nil, usageErr("-c FILE is required")
	}
	return config.Load(path)
}

// newLogger builds the process logger from the site file's log block.
func newLogger(cfg *config.Config, stderr io.Writer) *slog.Logger {
	var lvl slog.Level
	_ = lvl.UnmarshalText([]byte(cfg.Log.Level))
	opts := &slog.HandlerOptions{Level: lvl}
	if cfg.Log.Format == "json" {
		return slog.New(slog.NewJSONHandler(stderr, opts))
	}
	return slog.New(slog.NewTextHandler(stderr, opts))
}
