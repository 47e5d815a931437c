// Package bus publishes counting events on NATS and reads them back: an
// embedded server for single-box setups (with JetStream and a login), a
// reconnecting and authenticated connection, a core publisher and a
// filtered subscriber, and for persistence a JetStream stream per site, a
// Deliverer that drains an outbox into it (at least once from the outbox,
// exactly once in the stream), Follow to read the stream back, and a
// key-value bucket for live state. Subjects are
// "<prefix>.<site>.<source>.<rule>.<kind>".
package bus

import (
	"errors"
	"fmt"
	"strings"
	"unicode/utf8"
)

// ErrInvalidToken is wrapped by every subject token and prefix error.
var ErrInvalidToken = errors.New("invalid subject token")

// ValidToken checks that s can be one token of a NATS subject as tallyd
// writes them: non-empty, ASCII letters, digits, '-' and '_' only (no '.',
// no wildcards, no spaces). Site, source and rule names go through it.
func ValidToken(s string) error {
	if s == "" {
		return fmt.Errorf("%w %q: empty", ErrInvalidToken, s)
	}
	for i := 0; i < len(s); {
		r, size := utf8.DecodeRuneInString(s[i:])
		ok := r == '-' || r == '_' || ('a' <= r && r <= 'z') || ('A' <= r && r <= 'Z') || ('0' <= r && r <= '9')
		if !ok {
			return fmt.Errorf("%w %q: %q at byte %d is not a letter, digit, '-' or '_'", ErrInvalidToken, s, r, i)
		}
		i += size
	}
	return nil
}

// ValidPrefix checks a subject prefix: one or more valid tokens joined by
// dots, e.g. "tallyd" or "acme.tallyd".
func ValidPrefix(p string) error {
	if p == "" {
		return fmt.Errorf("%w: empty prefix", ErrInvalidToken)
	}
	for tok := range strings.SplitSeq(p, ".") {
		if err := ValidToken(tok); err != nil {
			return fmt.Errorf("prefix %q: %w", p, err)
		}
	}
	return nil
}
