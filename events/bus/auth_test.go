package bus

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"log/slog"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/jwt/v2"
	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nkeys"

	"tallyd/internal/testkit"
)

// userKey makes a user NKey and writes its seed to a file.
func userKey(t *testing.T, dir, name string) (pub, seed, file string) {
	t.Helper()
	kp, err := nkeys.CreateUser()
	must(t, err)
	s, err := kp.Seed()
	must(t, err)
	p, err := kp.PublicKey()
	must(t, err)
	file = filepath.Join(dir, name)
	must(t, os.WriteFile(file, append(s, '\n'), 0o600))
	return p, string(s), file
}

// operatorServer starts a server in operator (JWT) mode and writes a good
// credentials file, and one of a user whose account the server does not
// know. It returns the URL, the two files and the two user seeds.
func operatorServer(t *testing.T, dir string) (url, good, bad string, seeds []string) {
	t.Helper()
	okp, _ := nkeys.CreateOperator()
	opub, _ := okp.PublicKey()
	oc := jwt.NewOperatorClaims(opub)
	resolver := &server.MemAccResolver{}
	creds := func(name string, known bool) string {
		akp, _ := nkeys.CreateAccount()
		apub, _ := akp.PublicKey()
		ajwt, err := jwt.NewAccountClaims(apub).Encode(okp)
		must(t, err)
		if known {
			must(t, resolver.Store(apub, ajwt))
		}
		ukp, _ := nkeys.CreateUser()
		upub, _ := ukp.PublicKey()
		useed, _ := ukp.Seed()
		ujwt, err := jwt.NewUserClaims(upub).Encode(akp)
		must(t, err)
		b, err := jwt.FormatUserConfig(ujwt, useed)
		must(t, err)
		f := filepath.Join(dir, name)
		must(t, os.WriteFile(f, b, 0o600))
		seeds = append(seeds, string(useed))
		return f
	}
	good, bad = creds("good.creds", true), creds("bad.creds", false)
	url = startRaw(t, &server.Options{TrustedOperators: []*jwt.OperatorClaims{oc}, AccountResolver: resolver})
	return url, good, bad, seeds
}

// pki writes a CA, a server certificate for 127.0.0.1 and a client
// certificate (PEM files) and returns their paths.
type pki struct{ ca, serverCert, serverKey, clientCert, clientKey, otherCA string }

func makePKI(t *testing.T, dir string) pki {
	t.Helper()
	write := func(name, typ string, der []byte) string {
		f := filepath.Join(dir, name)
		must(t, os.WriteFile(f, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600))
		return f
	}
	newKey := func() *ecdsa.PrivateKey {
		k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
		must(t, err)
		return k
	}
	keyDER := func(k *ecdsa.PrivateKey) []byte {
		b, err := x509.MarshalPKCS8PrivateKey(k)
		must(t, err)
		return b
	}
	now := time.Now()
	ca := func(name string) (*x509.Certificate, *ecdsa.PrivateKey, string) {
		k := newKey()
		tpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: name},
			NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour), IsCA: true, BasicConstraintsValid: true,
			KeyUsage: x509.KeyUsageCertSign | x509.KeyUsageDigitalSignature}
		der, err := x509.CreateCertificate(rand.Reader, tpl, tpl, &k.PublicKey, k)
		must(t, err)
		c, err := x509.ParseCertificate(der)
		must(t, err)
		return c, k, write(name+".pem", "CERTIFICATE", der)
	}
	caCert, caKey, caFile := ca("ca")
	_, _, otherCA := ca("other-ca")
	leaf := func(name string, serial int64, usage x509.ExtKeyUsage) (string, string) {
		k := newKey()
		tpl := &x509.Certificate{SerialNumber: big.NewInt(serial), Subject: pkix.Name{CommonName: name},
			NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour), KeyUsage: x509.KeyUsageDigitalSignature,
			ExtKeyUsage: []x509.ExtKeyUsage{usage}, IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}}
		der, err := x509.CreateCertificate(rand.Reader, tpl, caCert, &k.PublicKey, caKey)
		must(t, err)
		return write(name+".pem", "CERTIFICATE", der), write(name+"-key.pem", "PRIVATE KEY", keyDER(k))
	}
	sc, sk := leaf("server", 2, x509.ExtKeyUsageServerAuth)
	cc, ck := leaf("client", 3, x509.ExtKeyUsageClientAuth)
	return pki{ca: caFile, serverCert: sc, serverKey: sk, clientCert: cc, clientKey: ck, otherCA: otherCA}
}

// TestConnectAuthKeepsSecrets connects with every kind of credentials,
// right and wrong, to servers that require them, and checks the outcome,
// the error's wording, and that no secret shows in any error or log line
// (the client's, with reconnect attempts, and the embedded server's).
func TestConnectAuthKeepsSecrets(t *testing.T) {
	dir := t.TempDir()
	var logs testkit.Buffer
	log := slog.New(slog.NewTextHandler(&logs, &slog.HandlerOptions{Level: slog.LevelDebug}))

	const pw, wrongPW = "pw-S3cret-4711", "pw-Wr0ng-0815"
	const token, wrongToken = "tok-S3cret-4711", "tok-Wr0ng-0815"
	nkPub, nkSeed, nkFile := userKey(t, dir, "user.nk")
	_, otherSeed, otherFile := userKey(t, dir, "other.nk")
	userSrv, err := StartEmbedded(EmbeddedOptions{User: "counter", Password: pw, NKey: nkPub}, log)
	must(t, err)
	defer userSrv.Shutdown()
	tokenURL := startRaw(t, &server.Options{Authorization: token})
	credsURL, goodCreds, badCreds, credSeeds := operatorServer(t, dir)
	p := makePKI(t, dir)
	tlsCfg, err := server.GenTLSConfig(&server.TLSConfigOpts{CertFile: p.serverCert, KeyFile: p.serverKey, CaFile: p.ca, Verify: true})
	must(t, err)
	tlsURL := startRaw(t, &server.Options{TLSConfig: tlsCfg, TLSVerify: true, TLSTimeout: 2})
	clientKeyPEM, err := os.ReadFile(p.clientKey)
	must(t, err)
	keyBody := strings.Split(string(clientKeyPEM), "\n")[1] // a line of the key's base64

	secrets := []string{pw, wrongPW, token, wrongToken, nkSeed, otherSeed, keyBody}
	secrets = append(secrets, credSeeds...)
	hostURL := strings.TrimPrefix(userSrv.URL(), "nats://")
	tokenHost := strings.TrimPrefix(tokenURL, "nats://")

	tests := []struct {
		name string
		url  string
		opts []Option
		want string // "" = connects; else the exact error, or a prefix ending in "..."
	}{
		{"user/password", userSrv.URL(), []Option{UserPassword("counter", pw)}, ""},
		{"wrong password", userSrv.URL(), []Option{UserPassword("counter", wrongPW)}, "nats connect with user counter: nats: authorization violation"},
		{"password in the URL", "nats://counter:" + pw + "@" + hostURL, nil, ""},
		{"wrong password in the URL", "nats://counter:" + wrongPW + "@" + hostURL, nil, "nats connect with user counter in the URL: nats: authorization violation"},
		{"no credentials", userSrv.URL(), nil, "nats connect: nats: authorization violation"},
		{"token", tokenURL, []Option{Token(token)}, ""},
		{"wrong token", tokenURL, []Option{Token(wrongToken)}, "nats connect with token: nats: authorization violation"},
		{"token in the URL without scheme", token + "@" + tokenHost, nil, ""},
		{"wrong token in the URL", "nats://" + wrongToken + "@" + tokenHost, nil, "nats connect with token in the URL: nats: authorization violation"},
		{"nkey seed file", userSrv.URL(), []Option{NKeySeedFile(nkFile)}, ""},
		{"seed of another nkey", userSrv.URL(), []Option{NKeySeedFile(otherFile)}, "nats connect with nkey U...: nats: authorization violation"},
		{"credentials file", credsURL, []Option{CredsFile(goodCreds)}, ""},
		{"credentials of an unknown account", credsURL, []Option{CredsFile(badCreds)}, "nats connect with credentials file " + badCreds + ": nats: authorization violation"},
		{"tls client certificate", tlsURL, []Option{TLSFiles(p.ca, p.clientCert, p.clientKey)}, ""},
		{"tls without client certificate", tlsURL, []Option{TLSFiles(p.ca, "", "")}, "nats connect over TLS: ..."},
		{"tls with another ca", tlsURL, []Option{TLSFiles(p.otherCA, p.clientCert, p.clientKey)}, "nats connect over TLS: nats: tls error: tls: failed to verify certificate: x509: certificate signed by unknown authority"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			nc, err := Connect(tc.url, "auth-test", log, tc.opts...)
			if tc.want == "" {
				if err != nil {
					t.Fatalf("Connect: %v", err)
				}
				must(t, nc.Flush())
				nc.Close()
				return
			}
			if err == nil {
				nc.Close()
				t.Fatalf("connected; want %q", tc.want)
			}
			got := err.Error()
			if strings.Contains(tc.want, "U...") { // the public key varies
				got = strings.Replace(got, otherPub(t, otherFile), "U...", 1)
			}
			if w, ok := strings.CutSuffix(tc.want, "..."); ok && !strings.HasPrefix(got, w) || !ok && got != tc.want {
				t.Errorf("error\n got %q\nwant %q", got, tc.want)
			}
			for _, s := range secrets {
				if strings.Contains(err.Error(), s) {
					t.Errorf("error shows secret %q: %v", s, err)
				}
			}
		})
	}

	// Wrong credentials while retrying in the background: the log says so,
	// without the password.
	nc, err := Connect("nats://counter:"+wrongPW+"@"+hostURL, "retrying", log, RetryFirst(true))
	must(t, err)
	testkit.WaitFor(t, 10*time.Second, "a logged failed attempt", func() bool {
		return strings.Contains(logs.String(), "authorization violation")
	})
	nc.Close()

	out := logs.String()
	for _, s := range secrets {
		if strings.Contains(out, s) {
			t.Errorf("logs show secret %q", s)
		}
	}
	for _, w := range []string{"nats connected", "tried=\"with user counter in the URL\"", "counter:xxxxx@127.0.0.1"} {
		if !strings.Contains(out, w) {
			t.Errorf("logs lack %q", w)
		}
	}
	if t.Failed() {
		t.Logf("logs:\n%s", out)
	}
}

func otherPub(t *testing.T, file string) string {
	pub, err := PublicNKey(file)
	must(t, err)
	return pub
}

// TestConnectCredentialFileErrors: unusable files and option mixes are
// refused before dialling (no server at all here), naming the file.
func TestConnectCredentialFileErrors(t *testing.T) {
	dir := t.TempDir()
	file := func(name, content string) string {
		f := filepath.Join(dir, name)
		must(t, os.WriteFile(f, []byte(content), 0o600))
		return f
	}
	_, _, seedFile := userKey(t, dir, "ok.nk")
	p := makePKI(t, dir)
	missing := filepath.Join(dir, "missing")
	empty := file("empty", "\n")
	notSeed := file("not-a-seed", "hello\n")
	accountSeed := func() string {
		kp, _ := nkeys.CreateAccount()
		s, _ := kp.Seed()
		return file("account.nk", string(s))
	}()
	const url = "nats://127.0.0.1:1" // never dialled
	tests := []struct {
		name string
		url  string
		opts []Option
		want string
	}{
		{"missing seed file", url, []Option{NKeySeedFile(missing)},
			"nats connect: unusable nats credentials: nkey seed file " + missing + ": no such file or directory"},
		{"empty seed file", url, []Option{NKeySeedFile(empty)},
			"nats connect: unusable nats credentials: nkey seed file " + empty + ": empty"},
		{"not a seed", url, []Option{NKeySeedFile(notSeed)},
			`nats connect: unusable nats credentials: nkey seed file ` + notSeed + `: no user nkey seed ("SU...") in it: nkeys: no nkey seed found`},
		{"account seed", url, []Option{NKeySeedFile(accountSeed)},
			`nats connect: unusable nats credentials: nkey seed file ` + accountSeed + `: no user nkey seed ("SU...") in it: nkeys: doesn't contain an user seed nkey`},
		{"missing credentials file", url, []Option{CredsFile(missing)},
			"nats connect: unusable nats credentials: credentials file " + missing + ": no such file or directory"},
		{"credentials without a jwt", url, []Option{CredsFile(seedFile)},
			"nats connect: unusable nats credentials: credentials file " + seedFile + ": no user JWT in it"},
		{"directory as credentials", url, []Option{CredsFile(dir)},
			"nats connect: unusable nats credentials: credentials file " + dir + ": is a directory"},
		{"missing ca", url, []Option{TLSFiles(missing, "", "")},
			"nats connect: unusable nats credentials: tls ca file " + missing + ": no such file or directory"},
		{"ca not pem", url, []Option{TLSFiles(notSeed, "", "")},
			"nats connect: unusable nats credentials: tls ca file " + notSeed + ": no PEM certificate in it"},
		{"certificate without key", url, []Option{TLSFiles("", p.clientCert, "")},
			`nats connect: unusable nats credentials: a tls client certificate needs both files (certificate "` + p.clientCert + `", key "")`},
		{"key of another certificate", url, []Option{TLSFiles("", p.clientCert, p.serverKey)},
			"nats connect: unusable nats credentials: tls certificate file " + p.clientCert + " with key file " + p.serverKey + ": tls: private key does not match public key"},
		{"missing key", url, []Option{TLSFiles("", p.clientCert, missing)},
			"nats connect: unusable nats credentials: tls key file " + missing + ": no such file or directory"},
		{"two kinds", url, []Option{UserPassword("counter", "pw"), Token("tok"), NKeySeedFile(seedFile)},
			"nats connect: unusable nats credentials: choose one of user/password, token, nkey seed file and credentials file (given: user/password, token, nkey seed file)"},
		{"url and option", "nats://counter:pw@127.0.0.1:1", []Option{Token("tok")},
			"nats connect: unusable nats credentials: the URL holds a user counter and a token is given too: choose one"},
		{"user without password", url, []Option{UserPassword("counter", "")},
			`nats connect: unusable nats credentials: user and password go together (user "counter", password set: false)`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			nc, err := Connect(tc.url, "files", nil, append(tc.opts, RetryFirst(true))...)
			if err == nil {
				nc.Close()
				t.Fatalf("Connect succeeded; want %q", tc.want)
			}
			if err.Error() != tc.want {
				t.Errorf("error\n got %q\nwant %q", err, tc.want)
			}
			if !errors.Is(err, ErrCredentials) {
				t.Errorf("%v does not wrap ErrCredentials", err)
			}
		})
	}
	if pub, err := PublicNKey(seedFile); err != nil || !nkeys.IsValidPublicUserKey(pub) {
		t.Errorf("PublicNKey = %q, %v", pub, err)
	}
	_ = nats.ErrAuthorization
}
