// Command tallyd counts people and vehicles in camera streams and recordings
// and publishes count and dwell events to NATS.
//
//	tallyd run -c site.yaml        daemon until SIGINT/SIGTERM
//	tallyd replay -c site.yaml     process recorded and generated sources to their end
//	tallyd check -c site.yaml      dry run: check the file, open every source
//	tallyd synth -c site.yaml ...  write a generated scene as video + ground truth
//	tallyd listen                  print events from NATS
//	tallyd totals -c site.yaml     the live totals and occupancy
//	tallyd track ...               the tracker alone over a detections file
//	tallyd score ...               tracking metrics against ground truth
//	tallyd snapshot -c site.yaml   one frame with the rules, tracks and counts drawn
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

	"tallyd/capture"
	"tallyd/internal/config"
	"tallyd/internal/pipeline"
)

// Exit codes.
const (
	exitOK         = 0
	exitFailed     = 1 // a failure while running, events not delivered included
	exitBadInput   = 2 // bad flags, bad site file, unreadable input: nothing started
	exitIncomplete = 3 // stopped before the input's end, or a recording ended early
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
	{"totals", "print the live totals and occupancy of a site", cmdTotals},
	{"track", "run the tracker alone over a detections file (MOTChallenge text format)", cmdTrack},
	{"snapshot", "draw one frame of a source with its rules, tracks and counts", cmdSnapshot},
	{"score", "score tracks against ground truth: CLEAR MOT, IDF1, HOTA", cmdScore},
	{"site", "store a shared site's file for its daemons (site push), or print it (site show)", cmdSite},
	{"fleet", "which daemon of a shared site holds which source, lease ages, last hand-overs", cmdFleet},
	{"models", "compare detector models on a source: speed, AP, count error; recommend one", cmdModels},
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
		case errors.Is(err, errUsage) || errors.Is(err, errBadFile) || errors.Is(err, config.ErrInvalid):
			fmt.Fprintf(stderr, "tallyd %s: %v\n", c.name, err)
			return exitBadInput
		case errors.Is(err, errIncomplete):
			fmt.Fprintf(stderr, "tallyd %s: %v\n", c.name, err)
			return exitIncomplete
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
	fmt.Fprintln(w, "\nExit codes: 0 done, 1 failed while running (events not delivered included), 2 bad input")
	fmt.Fprintln(w, "(nothing started), 3 incomplete (interrupted, or a recording ended early).")
}

// errUsage marks bad command-line input (exit code 2).
var errUsage = errors.New("usage")

// errBadFile marks an input file that cannot be used (exit code 2).
var errBadFile = errors.New("bad input file")

// badFile marks err as a bad input file, keeping its text.
func badFile(err error) error { return inputError{err} }

type inputError struct{ err error }

func (e inputError) Error() string        { return e.err.Error() }
func (e inputError) Unwrap() error        { return e.err }
func (e inputError) Is(target error) bool { return target == errBadFile }

// errIncomplete marks a run that stopped before the end of its input (exit
// code 3): the counts cover only what was read.
var errIncomplete = errors.New("incomplete")

func usageErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{errUsage}, args...)...)
}

// flags is a command's flag set: --help prints the usage once, to stdout; a
// bad flag is an error (exit 2) that points to --help, without the usage.
type flags struct {
	*flag.FlagSet
	synopsis string
	stdout   io.Writer
}

func newFlags(name, synopsis string, stdout io.Writer) *flags {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	fs.Usage = func() {} // printed by parseFlags, once
	return &flags{FlagSet: fs, synopsis: synopsis, stdout: stdout}
}

func (fs *flags) printUsage() {
	fmt.Fprintf(fs.stdout, "Usage: tallyd %s\n\nFlags:\n", fs.synopsis)
	fs.SetOutput(fs.stdout)
	fs.PrintDefaults()
	fs.SetOutput(io.Discard)
}

func parseFlags(fs *flags, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			fs.printUsage()
			return err
		}
		return usageErr("%v (see tallyd %s --help)", err, fs.Name())
	}
	if fs.NArg() > 0 {
		return usageErr("unexpected argument %q (see tallyd %s --help)", fs.Arg(0), fs.Name())
	}
	return nil
}

// loadConfig reads and checks the site file named by -c.
func loadConfig(path string) (*config.Config, error) {
	if path == "" {
		return nil, usageErr("-c FILE is required")
	}
	return pipeline.Load(path)
}

// newLogger builds the process logger from the site file's log block; the
// lines FFmpeg prints from inside OpenCV go through it too.
func newLogger(cfg *config.Config, stderr io.Writer) *slog.Logger {
	var lvl slog.Level
	_ = lvl.UnmarshalText([]byte(cfg.Log.Level))
	opts := &slog.HandlerOptions{Level: lvl}
	var log *slog.Logger
	if cfg.Log.Format == "json" {
		log = slog.New(slog.NewJSONHandler(stderr, opts))
	} else {
		log = slog.New(slog.NewTextHandler(stderr, opts))
	}
	capture.SetFFmpegLogger(log)
	return log
}
