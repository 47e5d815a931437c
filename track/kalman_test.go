package track

import (
	"math"
	"math/rand/v2"
	"testing"

	"tallyd/detect"
)

// Small dense matrix helpers for the reference filter below.

type mat [][]float64

func zeros(r, c int) mat {
	m := make(mat, r)
	for i := range m {
		m[i] = make([]float64, c)
	}
	return m
}

func eye(n int) mat {
	m := zeros(n, n)
	for i := range m {
		m[i][i] = 1
	}
	return m
}

func (a mat) mul(b mat) mat {
	out := zeros(len(a), len(b[0]))
	for i := range a {
		for k := range b {
			for j := range b[0] {
				out[i][j] += a[i][k] * b[k][j]
			}
		}
	}
	return out
}

func (a mat) t() mat {
	out := zeros(len(a[0]), len(a))
	for i := range a {
		for j := range a[i] {
			out[j][i] = a[i][j]
		}
	}
	return out
}

func (a mat) add(b mat, s float64) mat { // a + s·b
	out := zeros(len(a), len(a[0]))
	for i := range a {
		for j := range a[i] {
			out[i][j] = a[i][j] + s*b[i][j]
		}
	}
	return out
}

// cholesky returns L with a = L·Lᵀ, or false when a is not symmetric
// positive definite (the standard test: the factorisation exists exactly
// for such matrices).
func (a mat) cholesky() (mat, bool) {
	n := len(a)
	l := zeros(n, n)
	for i := range n {
		for j := 0; j <= i; j++ {
			s := a[i][j]
			for k := range j {
				s -= l[i][k] * l[j][k]
			}
			if i == j {
				if !(s > 0) {
					return nil, false
				}
				l[i][i] = math.Sqrt(s)
			} else {
				l[i][j] = s / l[j][j]
			}
		}
	}
	return l, true
}

// inverse of a symmetric positive definite matrix through its Cholesky factor.
func (a mat) inverseSPD() mat {
	l, ok := a.cholesky()
	if !ok {
		panic("not positive definite")
	}
	n := len(a)
	inv := zeros(n, n)
	for c := range n { // solve L·Lᵀ·x = e_c
		y := make([]float64, n)
		for i := range n {
			s := 0.0
			if i == c {
				s = 1
			}
			for k := range i {
				s -= l[i][k] * y[k]
			}
			y[i] = s / l[i][i]
		}
		for i := n - 1; i >= 0; i-- {
			s := y[i]
			for k := i + 1; k < n; k++ {
				s -= l[k][i] * inv[k][c]
			}
			inv[i][c] = s / l[i][i]
		}
	}
	return inv
}

// denseKalman is the textbook filter over the 8-state [cx, cy, w, h, vcx,
// vcy, vw, vh] with full matrices: x' = F x, P' = F P Fᵀ + Q; K = P Hᵀ S⁻¹
// with S = H P Hᵀ + R; x += K (z − H x); P = (I − K H) P.
type denseKalman struct {
	x mat // 8x1
	p mat // 8x8
}

func newDense(b detect.Box, m MotionConfig) denseKalman {
	z := measure(b)
	s := scale(z[2], z[3])
	k := denseKalman{x: zeros(8, 1), p: zeros(8, 8)}
	for i := range 4 {
		k.x[i][0] = z[i]
		k.p[i][i] = sq(m.MeasurementNoise * s)
		k.p[i+4][i+4] = sq(initialRate * s)
	}
	return k
}

func (k *denseKalman) predict(dt float64, m MotionConfig) {
	s := scale(k.x[2][0], k.x[3][0])
	f, q := eye(8), zeros(8, 8)
	for i := range 4 {
		f[i][i+4] = dt
		qi := sq(m.Acceleration * s)
		if i >= 2 {
			qi = sq(m.SizeAcceleration * s)
		}
		q[i][i] = qi * dt * dt * dt / 3
		q[i][i+4] = qi * dt * dt / 2
		q[i+4][i] = qi * dt * dt / 2
		q[i+4][i+4] = qi * dt
	}
	k.x = f.mul(k.x)
	k.p = f.mul(k.p).mul(f.t()).add(q, 1)
}

func (k *denseKalman) update(b detect.Box, m MotionConfig) {
	zv := measure(b)
	r := sq(m.MeasurementNoise * scale(k.x[2][0], k.x[3][0]))
	h := zeros(4, 8)
	z := zeros(4, 1)
	rm := zeros(4, 4)
	for i := range 4 {
		h[i][i] = 1
		z[i][0] = zv[i]
		rm[i][i] = r
	}
	s := h.mul(k.p).mul(h.t()).add(rm, 1)
	gain := k.p.mul(h.t()).mul(s.inverseSPD())
	k.x = k.x.add(gain.mul(z.add(h.mul(k.x), -1)), 1)
	k.p = eye(8).add(gain.mul(h), -1).mul(k.p)
}

// dense returns the block filter's state and covariance as 8-state matrices.
func (k *kalman) dense() (x, p mat) {
	x, p = zeros(8, 1), zeros(8, 8)
	for i, a := range k.ax {
		x[i][0], x[i+4][0] = a.x, a.v
		p[i][i], p[i][i+4], p[i+4][i], p[i+4][i+4] = a.pxx, a.pxv, a.pxv, a.pvv
	}
	return x, p
}

func closeRel(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*(1+math.Max(math.Abs(a), math.Abs(b)))
}

// TestKalmanMatchesDense runs the per-coordinate filter and the dense
// reference side by side over random steps and detections.
func TestKalmanMatchesDense(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	m := DefaultMotionConfig()
	start := detect.BoxXYWH(100, 200, 40, 90)
	k, d := newKalman(start, m), newDense(start, m)
	for step := range 300 {
		dt := rng.Float64() * 0.5
		k.predict(dt, m)
		d.predict(dt, m)
		if rng.IntN(4) > 0 { // now and then a missed detection
			b := detect.BoxXYWH(100+float64(step)*3+rng.NormFloat64()*2, 200+rng.NormFloat64()*2,
				40+rng.NormFloat64(), 90+rng.NormFloat64())
			k.update(b, m)
			d.update(b, m)
		}
		x, p := k.dense()
		for i := range 8 {
			if !closeRel(x[i][0], d.x[i][0], 1e-9) {
				t.Fatalf("step %d: state %d is %v, dense reference %v", step, i, x[i][0], d.x[i][0])
			}
			for j := range 8 {
				if !closeRel(p[i][j], d.p[i][j], 1e-9) {
					t.Fatalf("step %d: covariance (%d,%d) is %v, dense reference %v", step, i, j, p[i][j], d.p[i][j])
				}
			}
		}
	}
}

// TestKalmanConstantVelocity checks that the model is exact for the motion
// it assumes, over steps of varying length: once the filter has the
// velocity, predictions land on the true box.
func TestKalmanConstantVelocity(t *testing.T) {
	// Centre moves at (+80, −30) px/s, width grows 4 px/s, height 10 px/s.
	truth := func(sec float64) detect.Box {
		w, h := 40+4*sec, 100+10*sec
		cx, cy := 200+80*sec, 500-30*sec
		return detect.Box{X1: cx - w/2, Y1: cy - h/2, X2: cx + w/2, Y2: cy + h/2}
	}
	steps := []float64{0.033, 0.1, 0.3, 0.05, 0.2, 0.5} // frame gaps, dropped frames included
	m := DefaultMotionConfig()

	t.Run("prediction from a known state", func(t *testing.T) {
		k := newKalman(truth(0), m)
		k.ax[0].v, k.ax[1].v, k.ax[2].v, k.ax[3].v = 80, -30, 4, 10
		sec := 0.0
		for i := range 40 {
			dt := steps[i%len(steps)]
			k.predict(dt, m)
			sec += dt
			assertBox(t, k.box(), truth(sec), 1e-9, "predicted")
		}
	})
	t.Run("learnt from detections", func(t *testing.T) {
		k := newKalman(truth(0), m)
		sec := 0.0
		for i := range 300 {
			dt := steps[i%len(steps)]
			k.predict(dt, m)
			sec += dt
			if i >= 100 {
				assertBox(t, k.box(), truth(sec), 1e-6, "predicted before the update")
			}
			k.update(truth(sec), m)
		}
		k.predict(2, m) // a two-second gap
		assertBox(t, k.box(), truth(sec+2), 1e-6, "predicted over a gap")
	})
}

func assertBox(t *testing.T, got, want detect.Box, tol float64, what string) {
	t.Helper()
	g := [4]float64{got.X1, got.Y1, got.X2, got.Y2}
	w := [4]float64{want.X1, want.Y1, want.X2, want.Y2}
	for i := range g {
		if math.Abs(g[i]-w[i]) > tol {
			t.Fatalf("%s box %+v, want %+v (±%g)", what, got, want, tol)
		}
	}
}

// TestKalmanCovariancePositiveDefinite runs many predict/update cycles with
// gaps from nothing to seconds, noisy and missing detections, and checks
// that the covariance stays symmetric positive definite (it has a Cholesky
// factor) and bounded while detections keep coming.
func TestKalmanCovariancePositiveDefinite(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	m := DefaultMotionConfig()
	k := newKalman(detect.BoxXYWH(0, 0, 30, 60), m)
	for step := range 20000 {
		dt := [...]float64{0, 1e-6, 0.033, 0.1, 1, 3}[rng.IntN(6)]
		k.predict(dt, m)
		if rng.IntN(5) > 0 {
			c := k.box()
			k.update(detect.BoxXYWH(c.X1+rng.NormFloat64()*3, c.Y1+rng.NormFloat64()*3,
				30+rng.NormFloat64()*2, 60+rng.NormFloat64()*3), m)
		}
		_, p := k.dense()
		for i := range 8 {
			for j := range 8 {
				if p[i][j] != p[j][i] {
					t.Fatalf("step %d: covariance not symmetric at (%d,%d)", step, i, j)
				}
			}
		}
		if _, ok := p.cholesky(); !ok {
			t.Fatalf("step %d: covariance not positive definite: %v", step, p)
		}
	}
	// After a last detection the position variance is below the
	// measurement's: the filter did not drift into overconfidence or blow-up.
	k.update(detect.BoxXYWH(0, 0, 30, 60), m)
	r := sq(m.MeasurementNoise * scale(k.ax[2].x, k.ax[3].x))
	for i, a := range k.ax {
		if !(a.pxx > 0 && a.pxx <= r) {
			t.Errorf("axis %d: variance %v after an update, want within (0, %v]", i, a.pxx, r)
		}
	}
}

// TestKalmanDegenerateBoxes feeds empty and broken boxes: nothing becomes NaN
// and the filter keeps working.
func TestKalmanDegenerateBoxes(t *testing.T) {
	m := DefaultMotionConfig()
	k := newKalman(detect.Box{X1: 5, Y1: 5, X2: 5, Y2: 5}, m)
	k.predict(0.1, m)
	k.update(detect.Box{X1: 5, Y1: 5, X2: 5, Y2: 5}, m)
	k.update(detect.Box{X1: math.NaN(), Y1: 0, X2: math.Inf(1), Y2: 10}, m)
	k.predict(0.1, m)
	_, p := k.dense()
	if _, ok := p.cholesky(); !ok {
		t.Fatalf("covariance not positive definite: %v", p)
	}
	b := k.box()
	for _, v := range []float64{b.X1, b.Y1, b.X2, b.Y2} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("box %+v", b)
		}
	}
}

func TestMotionConfigValidate(t *testing.T) {
	c := DefaultByteTrackConfig()
	c.Motion = MotionConfig{MeasurementNoise: 0, Acceleration: -1, SizeAcceleration: math.Inf(1)}
	want := "motion.measurement_noise: must be above 0 and finite (found 0)\n" +
		"motion.acceleration: must be finite and not negative (found -1)\n" +
		"motion.size_acceleration: must be finite and not negative (found +Inf)"
	if err := c.Validate(); err == nil || err.Error() != want {
		t.Errorf("Validate error\n got: %v\nwant: %s", err, want)
	}
}
