// Package track links detections from successive frames of one source into
// tracks with stable integer IDs. Two trackers share the Track and Result
// types and the same methods: IoU, the baseline described below, and
// ByteTrack, with a motion model and two-stage association (see its type).
// Settings names one of them by Kind, holds the configuration of each with
// its defaults (DefaultSettings), checks it and builds the Tracker.
//
// # IoU tracker
//
// IoU is the baseline tracker. It has no motion model: a track is where its
// last matched detection was, and keeps that box while it is missed. Each
// Update does the following.
//
//  1. Association. Every (track, detection) pair whose IoU is at least
//     MinIoU is a candidate (with PerClass, only pairs of the same class).
//     Candidates are taken greedily by descending IoU; a pair is kept when
//     neither its track nor its detection is taken yet. Equal IoUs are
//     ordered by track (confirmed tracks by ID first, then tentative ones
//     by birth) and then by detection index, so the result depends only on
//     the input.
//  2. Matched tracks take the detection's box, score and time; Hits grows by
//     one and Misses goes back to 0. Without PerClass a track's class is the
//     one it was matched with most often (a tie keeps the current class).
//  3. Birth. Each unmatched detection starts a tentative track with one hit.
//     A tentative track must be matched in every following frame: a single
//     miss removes it silently. After BirthHits consecutive matched frames
//     (counting the first) it is confirmed and takes the next ID. With
//     BirthHits 1 a detection is confirmed in the frame it appears.
//  4. Death. A confirmed track that is not matched counts a miss; after more
//     than MaxMisses consecutive misses it is removed and reported once in
//     Result.Ended with its last matched box and time.
//
// IDs are taken only on confirmation, so they are dense (1, 2, 3, …) in
// confirmation order (tracks confirmed in the same frame in birth order), never
// reused, and stable for a track's life. Result.Active holds the confirmed
// tracks matched in this frame; tracks being missed are not reported until
// they are matched again or end. Misses are counted in Update calls, not in
// time, so MaxMisses should follow the processing frame rate.
package track

import (
	"time"

	"tallyd/detect"
)

// Track is the state of one tracked object after a frame update.
type Track struct {
	ID        int64      // stable, unique within one tracker, starts at 1
	Box       detect.Box // last matched box (or the predicted one while coasting)
	Class     string
	Score     float64
	Hits      int           // frames with a matched detection since birth
	Misses    int           // consecutive frames without a match
	Confirmed bool          // reached the birth threshold; rules see only confirmed tracks
	FirstSeen time.Duration // source timestamp of the first detection
	LastSeen  time.Duration // source timestamp of the last matched detection
	// Estimate is the motion model's box at the time of the update that
	// reported the track: filtered for a matched track, predicted for a
	// missed one. Zero for trackers without a motion model (IoU).
	Estimate detect.Box
}

// voteClass counts a matched detection of class for tr, before tr.Hits
// counts it, and sets tr.Class to the class matched most often (a tie keeps
// the current class). votes is nil until a second class is seen, so that a
// track of one class never allocates.
func voteClass(tr *Track, votes *map[string]int, class string) {
	if class == tr.Class && *votes == nil {
		return
	}
	if *votes == nil {
		*votes = map[string]int{tr.Class: tr.Hits}
	}
	(*votes)[class]++
	if (*votes)[class] > (*votes)[tr.Class] {
		tr.Class = class
	}
}

// Result is what one Update returns.
type Result struct {
	// Active holds confirmed tracks matched in this frame, ordered by ID.
	Active []Track
	// Ended holds confirmed tracks removed in this frame (too many misses),
	// ordered by ID, so that rules can close what these tracks held open.
	Ended []Track
	// Lost holds confirmed tracks not matched in this frame but still kept,
	// ordered by ID, with the motion model's prediction in Estimate: what a
	// display draws, or what a track file holds through a short gap. The
	// IoU tracker, which has no prediction, leaves it nil.
	Lost []Track
	// Born holds, for each track confirmed in this frame after more than
	// one matched frame, where it was in the updates before (ByteTrack
	// only): what a tracks file may add once the track is known to be real.
	Born []Birth
}

// Birth is where a track was seen in the updates before the one that
// confirmed it, oldest first, one entry per update (a tentative track is
// matched in every update until confirmed).
type Birth struct {
	ID        int64
	Boxes     []detect.Box // the matched detections
	Estimates []detect.Box // the motion model's boxes after each
}
