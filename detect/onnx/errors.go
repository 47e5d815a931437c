package onnx

import "errors"

// Sentinel errors wrapped by every SetupError, so callers can branch with
// errors.Is.
var (
	// ErrModel: the model file is missing, not ONNX, or has inputs or outputs
	// this detector cannot use.
	ErrModel = errors.New("unusable ONNX model")
	// ErrLibrary: the ONNX Runtime shared library is missing, not loadable or
	// of the wrong version.
	ErrLibrary = errors.New("unusable ONNX Runtime library")
	// ErrSetting: a setting does not fit the model (a class name the model
	// does not have, an input size the model fixes otherwise).
	ErrSetting = errors.New("setting does not fit the model")
)

// SetupError is a problem found when the detector starts. Key is the
// setting it concerns, relative to the detector's config block (e.g.
// "model", "library", "layout", "classes[0]"), so that the site file's line
// can be named; Msg names the file and what was expected.
type SetupError struct {
	Key  string
	Msg  string
	Kind error // ErrModel, ErrLibrary or ErrSetting
}

func (e *SetupError) Error() string { return e.Key + ": " + e.Msg }

// Unwrap returns the sentinel error.
func (e *SetupError) Unwrap() error { return e.Kind }

func modelErr(key, msg string) error   { return &SetupError{Key: key, Msg: msg, Kind: ErrModel} }
func libErr(msg string) error          { return &SetupError{Key: "library", Msg: msg, Kind: ErrLibrary} }
func settingErr(key, msg string) error { return &SetupError{Key: key, Msg: msg, Kind: ErrSetting} }
