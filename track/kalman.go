package track

import (
	"fmt"
	"math"

	"tallyd/detect"
)

// The motion model follows SORT (Bewley, Ge, Ott, Ramos, Upcroft, "Simple
// Online and Realtime Tracking", ICIP 2016): a Kalman filter per track with
// constant velocity, observed through the detected box. Three choices differ
// from the paper, each for a reason:
//
//   - State. SORT estimates [cx, cy, s, r] (centre, area, aspect ratio) and
//     the rates of cx, cy and s. Here the state is [cx, cy, w, h, vcx, vcy,
//     vw, vh]: centre, width and height, each with its rate, as in the later
//     trackers built on SORT. Width and height change independently, so a
//     person turning sideways or a car coming closer is followed without an
//     area rate that can drive the area below zero, and the box the filter
//     reports is always the one it measured in the same units.
//   - Time. Rates are per second, and the filter is predicted over the real
//     time between two frames (from their timestamps), not over "one frame":
//     a dropped frame or an uneven rate only means a longer step. The process
//     noise is that of a continuous white-noise acceleration model
//     (Bar-Shalom, Li, Kirubarajan, "Estimation with Applications to Tracking
//     and Navigation", 2001, chapter 6): over a step of dt seconds it adds
//     q·[dt³/3, dt²/2; dt²/2, dt] to the covariance of each (value, rate)
//     pair, so uncertainty grows with the gap.
//   - Scale. Noise is proportional to the size of the box, sqrt(w·h) (as
//     later SORT-style trackers scale theirs by the box height), so the same
//     settings fit a near lorry and a far pedestrian.
//
// With independent noise per coordinate the 8-state filter splits exactly
// into four filters of (value, rate), one per coordinate: the covariance
// stays block diagonal, and each 2x2 block is updated alone. That is how it
// is stored and computed, a few dozen operations per track per frame; a
// dense 8x8 reference implementation of the textbook equations in the tests
// checks that the two agree.

// MotionConfig tunes the tracker's Kalman filter. Noise is given relative to
// the size of a box (sqrt of width times height).
type MotionConfig struct {
	// MeasurementNoise is the standard deviation of a detected box's centre,
	// width and height, as a fraction of the box size.
	MeasurementNoise float64
	// Acceleration is the standard deviation of the change of the centre's
	// velocity over one second, in box sizes per second (the spectral
	// density of the white-noise acceleration is its square).
	Acceleration float64
	// SizeAcceleration is the same for the rate of change of width and
	// height; boxes usually change size more smoothly than they move.
	SizeAcceleration float64
}

// Default motion model settings, for people and vehicles seen at 5-30
// frames/s: a detector's boxes jitter by about 5% of their size.
const (
	DefaultMeasurementNoise = 0.05
	DefaultAcceleration     = 1.0
	DefaultSizeAcceleration = 0.25
)

// DefaultMotionConfig returns the default motion model settings.
func DefaultMotionConfig() MotionConfig {
	return MotionConfig{
		MeasurementNoise: DefaultMeasurementNoise,
		Acceleration:     DefaultAcceleration,
		SizeAcceleration: DefaultSizeAcceleration,
	}
}

// problems returns every invalid setting as a *ConfigError whose field is
// prefix + the setting's key.
func (c MotionConfig) problems(prefix string) []error {
	var errs []error
	if !(c.MeasurementNoise > 0 && !math.IsInf(c.MeasurementNoise, 1)) {
		errs = append(errs, &ConfigError{Field: prefix + "measurement_noise",
			Msg: fmt.Sprintf("must be above 0 and finite (found %v)", c.MeasurementNoise)})
	}
	for _, f := range []struct {
		key string
		v   float64
	}{{"acceleration", c.Acceleration}, {"size_acceleration", c.SizeAcceleration}} {
		if !(f.v >= 0 && !math.IsInf(f.v, 1)) {
			errs = append(errs, &ConfigError{Field: prefix + f.key,
				Msg: fmt.Sprintf("must be finite and not negative (found %v)", f.v)})
		}
	}
	return errs
}

// Filter constants that are not settings.
const (
	// initialRate is the standard deviation of a new track's rates, in box
	// sizes per second: large, so the second detection sets the velocity.
	initialRate = 2.0
	// minScale keeps the noise of degenerate (empty) boxes above zero, in
	// pixels.
	minScale = 1.0
)

// kfAxis is the filter of one coordinate: its value (pixels), its rate
// (pixels per second) and their 2x2 covariance.
type kfAxis struct {
	x, v          float64
	pxx, pxv, pvv float64
}

// kalman is the constant-velocity filter of one track over [cx, cy, w, h];
// see the notes above. Axes 0 and 1 are the centre, 2 and 3 the size.
type kalman struct {
	ax [4]kfAxis
}

// newKalman starts a filter at a detected box, at rest.
func newKalman(b detect.Box, m MotionConfig) kalman {
	var k kalman
	z := measure(b)
	s := scale(z[2], z[3])
	pos := sq(m.MeasurementNoise * s)
	rate := sq(initialRate * s)
	for i := range k.ax {
		k.ax[i] = kfAxis{x: z[i], pxx: pos, pvv: rate}
	}
	return k
}

// measure turns a box into the observed [cx, cy, w, h].
func measure(b detect.Box) [4]float64 {
	return [4]float64{(b.X1 + b.X2) / 2, (b.Y1 + b.Y2) / 2, b.X2 - b.X1, b.Y2 - b.Y1}
}

// scale is the size that noise is relative to.
func scale(w, h float64) float64 {
	s := math.Sqrt(max(w, 0) * max(h, 0))
	if !(s >= minScale) { // also NaN
		return minScale
	}
	return s
}

func sq(x float64) float64 { return x * x }

// predict moves the filter dt seconds ahead (nothing when dt ≤ 0).
func (k *kalman) predict(dt float64, m MotionConfig) {
	if !(dt > 0) {
		return
	}
	s := scale(k.ax[2].x, k.ax[3].x)
	dt2 := dt * dt
	for i := range k.ax {
		a := &k.ax[i]
		q := sq(m.Acceleration * s)
		if i >= 2 {
			q = sq(m.SizeAcceleration * s)
		}
		// x' = F x, P' = F P Fᵀ + Q with F = [1 dt; 0 1].
		a.x += a.v * dt
		a.pxx += 2*dt*a.pxv + dt2*a.pvv + q*dt2*dt/3
		a.pxv += dt*a.pvv + q*dt2/2
		a.pvv += q * dt
	}
}

// update corrects the filter with a detected box.
func (k *kalman) update(b detect.Box, m MotionConfig) {
	z := measure(b)
	r := sq(m.MeasurementNoise * scale(k.ax[2].x, k.ax[3].x))
	for i := range k.ax {
		a := &k.ax[i]
		// H = [1 0]: S = pxx + r, K = [pxx pxv]ᵀ / S, P' = (I − K H) P,
		// written so the result stays symmetric.
		inn := z[i] - a.x
		if math.IsNaN(inn) || math.IsInf(inn, 0) {
			continue // a broken box leaves the estimate as it was
		}
		s := a.pxx + r
		kx, kv := a.pxx/s, a.pxv/s
		a.x += kx * inn
		a.v += kv * inn
		a.pvv -= kv * a.pxv
		a.pxx *= r / s
		a.pxv *= r / s
	}
}

// stopSize sets the rates of width and height to 0, as a lost track should
// keep its size rather than grow or shrink unseen.
func (k *kalman) stopSize() {
	k.ax[2].v, k.ax[3].v = 0, 0
}

// box is the estimated box (an empty one if the size estimate went below 0).
func (k *kalman) box() detect.Box {
	w, h := max(k.ax[2].x, 0), max(k.ax[3].x, 0)
	cx, cy := k.ax[0].x, k.ax[1].x
	return detect.Box{X1: cx - w/2, Y1: cy - h/2, X2: cx + w/2, Y2: cy + h/2}
}
