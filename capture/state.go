package capture

// State is where a source stands, as Stats and Link report it.
//
// A recorded or generated source (file, folder, scene) is StateRunning while
// its worker reads, then StateEnded at the end of the recording,
// StateStopped when the worker was stopped first, or StateFailed when a
// read failed (Stats.Err says why).
//
// A live source (URL, device) reports its link while the worker runs:
// StateConnecting, StateUp or StateBackingOff (Stats.Err and Link.Reason say
// why it is not up), and StateFailed once it gave up because it can never
// work as configured. When its worker returns it is StateStopped, or
// StateFailed.
type State string

// States.
const (
	StateRunning    State = "running"     // recorded or generated: frames are being read
	StateEnded      State = "ended"       // recorded or generated: the end of the recording was reached
	StateStopped    State = "stopped"     // the worker was stopped before the source ended
	StateFailed     State = "failed"      // a read failed, or a live source gave up; Err says why
	StateConnecting State = "connecting"  // live: opening the source
	StateUp         State = "up"          // live: frames are arriving
	StateBackingOff State = "backing_off" // live: waiting before the next attempt
	// StateStandby is a shared source this daemon does not read now:
	// another daemon of the site holds it (see Standby).
	StateStandby State = "standby"
)
