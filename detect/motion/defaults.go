package motion

import "tallyd/detect"

// DefaultConfig is the detector the site file gets when it says nothing:
// a 500-frame background memory, OpenCV's own variance threshold, a slow
// learning rate so that people who stand still stay foreground for about
// 50 s at 10 fps, and kernels that suit people 20 px wide and more.
func DefaultConfig() Config {
	return Config{
		History:      500,
		VarThreshold: 16, // OpenCV's MOG2 default
		LearningRate: 0.0002,
		WarmupFrames: 30,
		MinArea:      300,
		OpenKernel:   3,
		CloseKernel:  7,
		Class:        detect.DefaultClass,
	}
}

// Classes is the one class every box gets (Config.Class).
func (d *Detector) Classes() []string { return []string{d.cfg.Class} }
