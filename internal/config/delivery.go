package config

import (
	"net"
	"path/filepath"
	"slices"
	"strings"
	"time"
	_ "time/tzdata" // interval time zones on machines without a zone database
)

// Output says where events go, and how delivery is kept safe.
type Output struct {
	NATS   NATS   `yaml:"nats"`
	Outbox Outbox `yaml:"outbox"`
	JSONL  string `yaml:"jsonl"` // optional JSON-lines file, relative to the config file's folder
}

// NATS configures the event bus.
type NATS struct {
	// URL of a NATS server; empty starts an embedded server.
	URL      string   `yaml:"url"`
	Embedded Embedded `yaml:"embedded"`
	// Prefix is the first subject token: <prefix>.<site>.<source>.<rule>.<kind>.
	Prefix    string    `yaml:"prefix"`
	Auth      NATSAuth  `yaml:"auth"` // for an external server
	TLS       NATSTLS   `yaml:"tls"`  // for an external server
	JetStream JetStream `yaml:"jetstream"`
}

// Embedded configures the in-process NATS server.
type Embedded struct {
	Host string `yaml:"host"`
	Port int    `yaml:"port"` // 0 picks a free port
	// User and Password, or NKey (a public user NKey), make clients log in;
	// required when Host is not a loopback address.
	User     string `yaml:"user"`
	Password Secret `yaml:"password"`
	NKey     string `yaml:"nkey"`
}

// NATSAuth is how tallyd logs in to an external server: one of user and
// password, a token, an NKey seed file or a credentials file.
type NATSAuth struct {
	User     string `yaml:"user"`
	Password Secret `yaml:"password"`
	Token    Secret `yaml:"token"`
	NKeySeed string `yaml:"nkey_seed"` // file holding the user's NKey seed
	Creds    string `yaml:"creds"`     // a .creds file (JWT and seed)
}

// NATSTLS is TLS towards an external server.
type NATSTLS struct {
	CA   string `yaml:"ca"`   // CA certificate file to verify the server
	Cert string `yaml:"cert"` // client certificate file (with Key)
	Key  string `yaml:"key"`  // client key file
}

// JetStreamMode says whether events go to a JetStream stream.
type JetStreamMode string

// JetStream modes.
const (
	JetStreamAuto     JetStreamMode = "auto"     // use it when the server has it (the embedded one always does)
	JetStreamRequired JetStreamMode = "required" // refuse to start without it
	JetStreamOff      JetStreamMode = "off"      // plain subjects, no persistence
)

// JetStreamModes lists the modes, the default first.
var JetStreamModes = []JetStreamMode{JetStreamAuto, JetStreamRequired, JetStreamOff}

// JetStream configures the site's stream and key-value bucket.
type JetStream struct {
	Mode            JetStreamMode `yaml:"mode"`
	MaxAge          Duration      `yaml:"max_age"`          // events older than this leave the stream (0: kept)
	MaxBytes        int64         `yaml:"max_bytes"`        // the stream's size limit (0: none)
	DuplicateWindow Duration      `yaml:"duplicate_window"` // how long an event id is remembered for de-duplication
	Replicas        int           `yaml:"replicas"`         // 1, or 3 on a cluster
	MaxPending      int           `yaml:"max_pending"`      // events sent and not yet acknowledged
	Bucket          string        `yaml:"bucket"`           // key-value bucket of live totals; default tallyd-<site>
}

// Outbox bounds the on-disk outbox under state_dir.
type Outbox struct {
	MaxBytes int64    `yaml:"max_bytes"` // past this the oldest events are dropped (counted)
	MaxAge   Duration `yaml:"max_age"`   // events older than this are dropped (counted)
}

// Intervals asks for a totals event per rule every Every.
type Intervals struct {
	Every    Duration `yaml:"every"`     // 0: none
	TimeZone string   `yaml:"time_zone"` // IANA name for aligning intervals and days; default UTC
}

// Delivery defaults that belong to the site file itself. Stream, bucket and
// outbox defaults come from their packages (see Defaults).
const (
	DefaultStateDir = ".tallyd"
	DefaultTimeZone = "UTC"
	// MinInterval and MaxInterval bound intervals.every.
	MinInterval = time.Minute
	MaxInterval = 24 * time.Hour
)

// delivery checks the output keys beyond the NATS URL: embedded server
// auth, external auth and TLS, JetStream, outbox, intervals, state_dir.
func (v *validator) delivery() {
	n := v.c.Output.NATS
	e := n.Embedded
	p := "output.nats."
	if n.URL == "" {
		switch {
		case e.User != "" && e.Password == "":
			v.fail(p+"embedded.password", "is required with embedded.user")
		case e.User == "" && e.Password != "":
			v.fail(p+"embedded.password", "is set without embedded.user")
		case e.User != "" && e.NKey != "":
			v.fail(p+"embedded.nkey", "set either user and password or nkey, not both")
		}
		if e.NKey != "" && !strings.HasPrefix(e.NKey, "U") {
			v.fail(p+"embedded.nkey", "want a public user NKey starting with U (found %q)", clip(e.NKey))
		}
		if !isLoopback(e.Host) && e.User == "" && e.NKey == "" {
			v.fail(p+"embedded.host", "%s is reachable from the network: set embedded.user and password (or nkey), or anyone there can publish forged counts", e.Host)
		}
	} else {
		for _, k := range []string{"user", "password", "nkey"} {
			if (k == "user" && e.User != "") || (k == "password" && e.Password != "") || (k == "nkey" && e.NKey != "") {
				v.fail(p+"embedded."+k, "applies to the embedded server only (url is set)")
			}
		}
	}
	a := n.Auth
	kinds := 0
	for _, set := range []bool{a.User != "" || a.Password != "", a.Token != "", a.NKeySeed != "", a.Creds != ""} {
		if set {
			kinds++
		}
	}
	switch {
	case kinds > 0 && n.URL == "":
		v.fail(p+"auth", "applies to an external server (url); the embedded server's login is embedded.user/password")
	case kinds > 1:
		v.fail(p+"auth", "set one of user and password, token, nkey_seed and creds (found %d)", kinds)
	case a.User != "" && a.Password == "":
		v.fail(p+"auth.password", "is required with auth.user")
	case a.User == "" && a.Password != "":
		v.fail(p+"auth.password", "is set without auth.user")
	}
	for _, f := range []struct{ key, path string }{{"auth.nkey_seed", a.NKeySeed}, {"auth.creds", a.Creds},
		{"tls.ca", n.TLS.CA}, {"tls.cert", n.TLS.Cert}, {"tls.key", n.TLS.Key}} {
		if f.path != "" {
			v.file(p+f.key, f.path, "a file")
		}
	}
	if (n.TLS.Cert == "") != (n.TLS.Key == "") {
		v.fail(p+"tls", "set cert and key together")
	}
	if (n.TLS.CA != "" || n.TLS.Cert != "") && n.URL == "" {
		v.fail(p+"tls", "applies to an external server (url)")
	}
	j := n.JetStream
	if !slices.Contains(JetStreamModes, j.Mode) {
		v.fail(p+"jetstream.mode", "want %s (found %q)", orList(toStrings(JetStreamModes)), j.Mode)
	}
	if j.MaxAge.Duration < 0 {
		v.fail(p+"jetstream.max_age", "must not be negative (found %v)", j.MaxAge.Duration)
	}
	if j.MaxBytes < 0 {
		v.fail(p+"jetstream.max_bytes", "must not be negative, 0 for no limit (found %d)", j.MaxBytes)
	}
	if d := j.DuplicateWindow.Duration; d < time.Second || (j.MaxAge.Duration > 0 && d > j.MaxAge.Duration) {
		v.fail(p+"jetstream.duplicate_window", "must be at least 1s and at most max_age (found %v)", d)
	}
	if j.Replicas < 1 || j.Replicas > 5 {
		v.fail(p+"jetstream.replicas", "must be within 1..5 (found %d)", j.Replicas)
	}
	if j.MaxPending < 1 || j.MaxPending > 65536 {
		v.fail(p+"jetstream.max_pending", "must be within 1..65536 (found %d)", j.MaxPending)
	}
	if j.Bucket != "" {
		v.token(p+"jetstream.bucket", j.Bucket)
	}
	o := v.c.Output.Outbox
	if o.MaxBytes < 1<<20 {
		v.fail("output.outbox.max_bytes", "must be at least 1 MiB (1048576) (found %d)", o.MaxBytes)
	}
	if o.MaxAge.Duration < time.Minute {
		v.fail("output.outbox.max_age", "must be at least 1m (found %v)", o.MaxAge.Duration)
	}
	iv := v.c.Intervals
	if d := iv.Every.Duration; d != 0 && (d < MinInterval || d > MaxInterval || d%time.Minute != 0) {
		v.fail("intervals.every", "want a whole number of minutes from %v to %v, or 0 for none (found %v)", MinInterval, MaxInterval, d)
	}
	if _, err := time.LoadLocation(iv.TimeZone); err != nil || iv.TimeZone == "" || iv.TimeZone == "Local" {
		v.fail("intervals.time_zone", "want an IANA time zone such as Europe/Oslo or UTC (found %q)", iv.TimeZone)
	}
	if v.c.StateDir == "" {
		v.fail("state_dir", "is required")
	} else {
		v.pathLen("state_dir", v.c.StateDir)
	}
}

// isLoopback reports whether host is reachable from this machine only.
func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// clip shortens a value for an error message.
func clip(s string) string {
	if len(s) > 12 {
		return s[:12] + "..."
	}
	return s
}

// Location is the time zone of interval totals (validated).
func (iv Intervals) Location() *time.Location {
	loc, err := time.LoadLocation(iv.TimeZone)
	if err != nil {
		return time.UTC
	}
	return loc
}

// StatePath is a file or folder under state_dir, resolved against the site
// file's folder.
func (c *Config) StatePath(name string) string {
	return filepath.Join(c.Resolve(c.StateDir), name)
}
