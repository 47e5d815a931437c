package bus

import (
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"io/fs"
	"net/url"
	"os"
	"strings"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nkeys"
)

// ErrCredentials is wrapped by Connect's errors about its own credentials
// and TLS files: one is missing, unreadable or not what it should be, or the
// options do not go together. Nothing was dialled; callers treat it as bad
// input. The errors name the file, never its content.
var ErrCredentials = errors.New("unusable nats credentials")

// Option changes how Connect connects.
type Option func(*options)

// options are what Connect's Options ask for; secrets stay in here and in
// the nats options built from them, never in errors or logs.
type options struct {
	retryFirst     bool
	user, password string
	token          string
	nkeySeedFile   string
	credsFile      string
	caFile         string
	certFile       string
	keyFile        string
}

// RetryFirst makes Connect return at once when the server cannot be reached
// yet: the connection keeps trying in the background with the usual
// back-off, and what is published meanwhile waits in the client's buffer, as
// during any later outage.
func RetryFirst(on bool) Option { return func(o *options) { o.retryFirst = on } }

// UserPassword authenticates with a user name and password, kept out of the
// URL (and so out of the process list and logs).
func UserPassword(user, password string) Option {
	return func(o *options) { o.user, o.password = user, password }
}

// Token authenticates with a token, kept out of the URL.
func Token(token string) Option { return func(o *options) { o.token = token } }

// NKeySeedFile authenticates with the NKey whose seed ("SU...") is in file:
// Connect reads it to learn the public key, and again each time the server
// asks for a signed nonce, so the seed is not held in memory.
func NKeySeedFile(file string) Option { return func(o *options) { o.nkeySeedFile = file } }

// CredsFile authenticates with a NATS credentials file (a user JWT and its
// NKey seed, as written by nsc), for servers run in operator mode.
func CredsFile(file string) Option { return func(o *options) { o.credsFile = file } }

// TLSFiles makes Connect use TLS. caFile (PEM), when set, holds the CA
// certificates the server's certificate must be signed by, instead of the
// system's; certFile and keyFile (PEM), when set, are the certificate and
// private key presented to servers that verify clients. Either part may be
// empty, not both.
func TLSFiles(caFile, certFile, keyFile string) Option {
	return func(o *options) { o.caFile, o.certFile, o.keyFile = caFile, certFile, keyFile }
}

// PublicNKey is the public key ("U...") of the user NKey seed in file: what
// an embedded server's EmbeddedOptions.NKey needs so that clients holding
// the seed may connect.
func PublicNKey(file string) (string, error) {
	kp, err := userKeyFromFile("nkey seed file", file)
	if err != nil {
		return "", err
	}
	defer kp.Wipe()
	pub, err := kp.PublicKey()
	if err != nil {
		return "", fmt.Errorf("%w: nkey seed file %s: %w", ErrCredentials, file, err)
	}
	return pub, nil
}

// natsOptions checks the files and turns the options into nats options. It
// also says what was tried ("with user counter", "with token", "with nkey
// U...", "with credentials file F", each maybe followed by "over TLS"), for
// errors: never a secret.
func (o *options) natsOptions(rawURL string) ([]nats.Option, string, error) {
	var kinds []string
	if o.user != "" || o.password != "" {
		kinds = append(kinds, "user/password")
	}
	if o.token != "" {
		kinds = append(kinds, "token")
	}
	if o.nkeySeedFile != "" {
		kinds = append(kinds, "nkey seed file")
	}
	if o.credsFile != "" {
		kinds = append(kinds, "credentials file")
	}
	inURL := urlCredentials(rawURL)
	if len(kinds) > 1 {
		return nil, "", fmt.Errorf("%w: choose one of user/password, token, nkey seed file and credentials file (given: %s)", ErrCredentials, strings.Join(kinds, ", "))
	}
	if len(kinds) == 1 && inURL != "" {
		return nil, "", fmt.Errorf("%w: the URL holds a %s and a %s is given too: choose one", ErrCredentials, inURL, kinds[0])
	}
	var opts []nats.Option
	tried := ""
	switch {
	case o.user != "" || o.password != "":
		if o.user == "" || o.password == "" {
			return nil, "", fmt.Errorf("%w: user and password go together (user %q, password set: %t)", ErrCredentials, o.user, o.password != "")
		}
		opts = append(opts, nats.UserInfo(o.user, o.password))
		tried = "user " + o.user
	case o.token != "":
		opts = append(opts, nats.Token(o.token))
		tried = "token"
	case o.nkeySeedFile != "":
		pub, err := PublicNKey(o.nkeySeedFile)
		if err != nil {
			return nil, "", err
		}
		file := o.nkeySeedFile
		opts = append(opts, nats.Nkey(pub, func(nonce []byte) ([]byte, error) { return signWithFile(file, nonce) }))
		tried = "nkey " + pub
	case o.credsFile != "":
		if err := checkCreds(o.credsFile); err != nil {
			return nil, "", err
		}
		opts = append(opts, nats.UserCredentials(o.credsFile))
		tried = "credentials file " + o.credsFile
	case inURL != "":
		tried = inURL + " in the URL"
	}
	tlsOpts, err := o.tlsOptions()
	if err != nil {
		return nil, "", err
	}
	if tried != "" {
		tried = "with " + tried
	}
	if len(tlsOpts) > 0 {
		opts = append(opts, tlsOpts...)
		tried = strings.TrimSpace(tried + " over TLS")
	}
	return opts, tried, nil
}

// tlsOptions checks the CA, certificate and key files.
func (o *options) tlsOptions() ([]nats.Option, error) {
	var opts []nats.Option
	if o.caFile != "" {
		pem, err := readAuthFile("tls ca file", o.caFile)
		if err != nil {
			return nil, err
		}
		if !x509.NewCertPool().AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("%w: tls ca file %s: no PEM certificate in it", ErrCredentials, o.caFile)
		}
		opts = append(opts, nats.RootCAs(o.caFile))
	}
	if o.certFile != "" || o.keyFile != "" {
		if o.certFile == "" || o.keyFile == "" {
			return nil, fmt.Errorf("%w: a tls client certificate needs both files (certificate %q, key %q)", ErrCredentials, o.certFile, o.keyFile)
		}
		certPEM, err := readAuthFile("tls certificate file", o.certFile)
		if err != nil {
			return nil, err
		}
		keyPEM, err := readAuthFile("tls key file", o.keyFile)
		if err != nil {
			return nil, err
		}
		_, err = tls.X509KeyPair(certPEM, keyPEM)
		wipe(keyPEM)
		if err != nil {
			return nil, fmt.Errorf("%w: tls certificate file %s with key file %s: %w", ErrCredentials, o.certFile, o.keyFile, err)
		}
		opts = append(opts, nats.ClientCert(o.certFile, o.keyFile))
	}
	return opts, nil
}

// readAuthFile reads a credentials file, naming it (as kind) in errors.
func readAuthFile(kind, file string) ([]byte, error) {
	b, err := os.ReadFile(file)
	if err != nil {
		var pe *fs.PathError
		if errors.As(err, &pe) {
			err = pe.Err // the path is named once, below
		}
		return nil, fmt.Errorf("%w: %s %s: %w", ErrCredentials, kind, file, err)
	}
	if len(strings.TrimSpace(string(b))) == 0 {
		return nil, fmt.Errorf("%w: %s %s: empty", ErrCredentials, kind, file)
	}
	return b, nil
}

// userKeyFromFile reads a user NKey seed from a seed or credentials file.
func userKeyFromFile(kind, file string) (nkeys.KeyPair, error) {
	b, err := readAuthFile(kind, file)
	if err != nil {
		return nil, err
	}
	defer wipe(b)
	kp, err := nkeys.ParseDecoratedUserNKey(b)
	if err != nil {
		return nil, fmt.Errorf("%w: %s %s: no user nkey seed (\"SU...\") in it: %w", ErrCredentials, kind, file, err)
	}
	return kp, nil
}

// signWithFile signs the server's nonce with the seed in file, read anew.
func signWithFile(file string, nonce []byte) ([]byte, error) {
	kp, err := userKeyFromFile("nkey seed file", file)
	if err != nil {
		return nil, err
	}
	defer kp.Wipe()
	return kp.Sign(nonce)
}

// checkCreds checks that a credentials file holds a user JWT and a seed.
func checkCreds(file string) error {
	b, err := readAuthFile("credentials file", file)
	if err != nil {
		return err
	}
	defer wipe(b)
	jwt, err := nkeys.ParseDecoratedJWT(b)
	if err != nil || strings.Count(jwt, ".") != 2 || strings.ContainsAny(jwt, " \n\t") {
		return fmt.Errorf("%w: credentials file %s: no user JWT in it", ErrCredentials, file)
	}
	kp, err := userKeyFromFile("credentials file", file)
	if err != nil {
		return err
	}
	kp.Wipe()
	return nil
}

// urlCredentials names the kind of credentials in a URL list ("user alice",
// "token") or is empty.
func urlCredentials(raw string) string {
	for p := range strings.SplitSeq(raw, ",") {
		u, err := url.Parse(withScheme(strings.TrimSpace(p)))
		if err != nil || u.User == nil {
			continue
		}
		if _, ok := u.User.Password(); ok {
			return "user " + u.User.Username()
		}
		return "token"
	}
	return ""
}

// authErr turns the server's refusal of the credentials, which the client
// passes on in the server's words ("nats: Authorization Violation"), into
// nats.ErrAuthorization, so that errors read alike and callers can test.
func authErr(err error) error {
	if errors.Is(err, nats.ErrAuthorization) {
		return nats.ErrAuthorization
	}
	return err
}

// withScheme adds "nats://" to a URL written without a scheme, as the NATS
// client does, so that "TOKEN@host:4222" parses with its user part.
func withScheme(raw string) string {
	if raw == "" || strings.Contains(raw, "://") {
		return raw
	}
	return "nats://" + raw
}

func wipe(b []byte) {
	for i := range b {
		b[i] = 'x'
	}
}
