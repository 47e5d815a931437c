package config

import (
	"fmt"
	"io"
	"log/slog"
	"os"
	"strings"
)

// Secret is a password or token from the site file. It prints as "xxxxx"
// (in logs, errors, %v and %+v dumps, YAML and JSON); Value gives the text to
// use. In the file it may be written out, or taken from elsewhere so that
// the site file holds no secret: "env:NAME" reads the environment variable
// NAME, "file:PATH" the first line of a file (relative to the site file's
// folder); "literal:TEXT" is TEXT itself, for a secret that starts with
// "env:" or "file:".
type Secret string

const redacted = "xxxxx"

// maxSecretFile bounds a secret file.
const maxSecretFile = 64 << 10

// Value is the secret itself, for opening a connection only.
func (s Secret) Value() string { return string(s) }

// String is the redacted form: "xxxxx", or "" when no secret is set.
func (s Secret) String() string {
	if s == "" {
		return ""
	}
	return redacted
}

// Format prints the redacted form for every verb.
func (s Secret) Format(f fmt.State, verb rune) {
	if verb == 'q' {
		fmt.Fprintf(f, "%q", s.String())
		return
	}
	_, _ = f.Write([]byte(s.String()))
}

// LogValue keeps the secret out of slog output.
func (s Secret) LogValue() slog.Value { return slog.StringValue(s.String()) }

// MarshalYAML writes the redacted form.
func (s Secret) MarshalYAML() (any, error) { return s.String(), nil }

// MarshalJSON writes the redacted form.
func (s Secret) MarshalJSON() ([]byte, error) { return []byte(fmt.Sprintf("%q", s.String())), nil }

// secrets lists every secret of the site file with its key path.
func (c *Config) secrets() []struct {
	path string
	s    *Secret
} {
	out := []struct {
		path string
		s    *Secret
	}{
		{"output.nats.embedded.password", &c.Output.NATS.Embedded.Password},
		{"output.nats.auth.password", &c.Output.NATS.Auth.Password},
		{"output.nats.auth.token", &c.Output.NATS.Auth.Token},
		{"http.token", &c.HTTP.Token},
	}
	for i := range c.Sources {
		out = append(out, struct {
			path string
			s    *Secret
		}{fmt.Sprintf("sources[%d].password", i), &c.Sources[i].Password})
	}
	return out
}

// resolveSecrets replaces env:, file: and literal: secrets by their values.
func (c *Config) resolveSecrets() Errors {
	var errs Errors
	if t := string(c.HTTP.Token); t != "" && !strings.HasPrefix(t, "env:") && !strings.HasPrefix(t, "file:") {
		errs = append(errs, c.Errorf("http.token", "want env:NAME or file:PATH, so that the token is not in the site file"))
		c.HTTP.Token = ""
	}
	for _, k := range c.secrets() {
		v := string(*k.s)
		switch {
		case strings.HasPrefix(v, "literal:"):
			*k.s = Secret(strings.TrimPrefix(v, "literal:"))
		case strings.HasPrefix(v, "env:"):
			name := strings.TrimPrefix(v, "env:")
			val, ok := os.LookupEnv(name)
			if !ok || val == "" {
				errs = append(errs, c.Errorf(k.path, "environment variable %s is not set", name))
				continue
			}
			*k.s = Secret(val)
		case strings.HasPrefix(v, "file:"):
			path := c.Resolve(strings.TrimPrefix(v, "file:"))
			val, err := readSecretFile(path)
			if err != nil {
				errs = append(errs, c.Errorf(k.path, "%v", err))
				continue
			}
			*k.s = Secret(val)
		}
	}
	return errs
}

// readSecretFile reads the first line of a small file.
func readSecretFile(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("cannot read %q: %v", path, unwrapPathErr(err))
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, maxSecretFile+1))
	if err != nil {
		return "", fmt.Errorf("cannot read %q: %v", path, err)
	}
	if len(b) > maxSecretFile {
		return "", fmt.Errorf("%q is over %d bytes; a secret file holds one line", path, maxSecretFile)
	}
	line, _, _ := strings.Cut(string(b), "\n")
	line = strings.TrimRight(line, "\r \t")
	if line == "" {
		return "", fmt.Errorf("%q is empty", path)
	}
	return line, nil
}
