// Package pipeline wires the stages of tallyd together for one site: capture
// workers feed a detector shared by every source, then a tracker, the rules
// and the publishers per source.
//
// Where things are:
//   - site.go: every conversion from the site file to a stage's settings;
//   - build.go: Build opens sources, detector and publishers; Close;
//   - run.go: Run starts the workers and shuts them down in order;
//   - scheduler.go: how detect workers share the sources;
//   - frame.go: the per-frame path, start to end, in one method (process);
//   - source.go, counters.go: what is held and counted per source;
//   - publish.go: events to every publisher, failures reported per period;
//   - status.go: status lines, the summary and the truth of generated scenes;
//   - check.go: the dry run.
package pipeline
