package config

import (
	"encoding/base64"
	"fmt"
	"os"
	"regexp"
	"strings"
)

// Env looks up an environment variable; os.LookupEnv is one.
type Env func(name string) (string, bool)

// Resolver reads secrets for Resolve.
type Resolver struct {
	Env      Env                               // nil means os.LookupEnv
	ReadFile func(path string) ([]byte, error) // nil means os.ReadFile
}

var reEnvRef = regexp.MustCompile(`\$\{([A-Za-z_][A-Za-z0-9_]*)\}`)

// Resolve reads every secret the configuration refers to: the webhook
// signing keys and SMTP passwords (from secret_env/secret_file,
// password_env/password_file) and ${VAR} references inside the store and
// source URLs. Missing secrets are errors naming the variable or file,
// never a value.
func (c *Config) Resolve(r Resolver) error {
	env := r.Env
	if env == nil {
		env = os.LookupEnv
	}
	read := r.ReadFile
	if read == nil {
		read = os.ReadFile
	}
	var problems []string
	get := func(what, envName, file string) Secret {
		switch {
		case envName != "":
			v, ok := env(envName)
			if !ok || v == "" {
				problems = append(problems, fmt.Sprintf("%s: environment variable %s is not set", what, envName))
				return ""
			}
			return Secret(v)
		case file != "":
			b, err := read(file)
			if err != nil {
				problems = append(problems, fmt.Sprintf("%s: reading the secret file: %v", what, err))
				return ""
			}
			v := strings.TrimRight(string(b), "\r\n")
			if v == "" {
				problems = append(problems, fmt.Sprintf("%s: secret file %s is empty", what, file))
			}
			return Secret(v)
		}
		return ""
	}
	for _, name := range sortedKeys(c.Notifiers) {
		n := c.Notifiers[name]
		switch n.Kind() {
		case "webhook":
			what := fmt.Sprintf("notifier %q", name)
			n.Secret = get(what, n.SecretEnv, n.SecretFile)
			n.PreviousSecret = get(what+" (previous key)", n.PreviousSecretEnv, n.PreviousSecretFile)
			for _, s := range []struct {
				what string
				v    Secret
			}{{what, n.Secret}, {what + " (previous key)", n.PreviousSecret}} {
				if msg := checkSigningSecret(s.v.Reveal()); msg != "" {
					problems = append(problems, s.what+": "+msg)
				}
			}
		case "smtp":
			n.SMTP.Password = get(fmt.Sprintf("notifier %q", name), n.SMTP.PasswordEnv, n.SMTP.PasswordFile)
		}
	}
	expand := func(what, u string) string {
		return reEnvRef.ReplaceAllStringFunc(u, func(ref string) string {
			name := reEnvRef.FindStringSubmatch(ref)[1]
			v, ok := env(name)
			if !ok {
				problems = append(problems, fmt.Sprintf("%s: environment variable %s is not set", what, name))
			}
			return v
		})
	}
	c.resolved = map[string]Secret{}
	c.resolvedStore = Secret(expand("store", c.Store))
	for _, name := range sortedKeys(c.Sources) {
		c.resolved[name] = Secret(expand(fmt.Sprintf("source %q", name), c.Sources[name]))
	}
	if len(problems) > 0 {
		return &Error{Problems: problems}
	}
	return nil
}

// StoreURL returns the store URL with ${VAR} references expanded (after
// Resolve), else as written.
func (c *Config) StoreURL() string {
	if c.resolvedStore != "" {
		return c.resolvedStore.Reveal()
	}
	return c.Store
}

// SourceURL returns the named source's URL with ${VAR} references expanded
// (after Resolve), else as written.
func (c *Config) SourceURL(name string) string {
	if s, ok := c.resolved[name]; ok {
		return s.Reveal()
	}
	return c.Sources[name]
}

// ResolveStore expands ${VAR} references in the store URL only, for
// commands that read the store and nothing else.
func (c *Config) ResolveStore(r Resolver) error {
	env := r.Env
	if env == nil {
		env = os.LookupEnv
	}
	var missing []string
	u := reEnvRef.ReplaceAllStringFunc(c.Store, func(ref string) string {
		name := reEnvRef.FindStringSubmatch(ref)[1]
		v, ok := env(name)
		if !ok {
			missing = append(missing, fmt.Sprintf("store: environment variable %s is not set", name))
		}
		return v
	})
	if len(missing) > 0 {
		return &Error{Problems: missing}
	}
	c.resolvedStore = Secret(u)
	return nil
}

// checkSigningSecret says what is wrong with a webhook secret written
// whsec_BASE64 whose key does not decode ("" when nothing is); the
// webhook notifier keys HMAC with the decoded bytes of such a secret.
func checkSigningSecret(s string) string {
	rest, ok := strings.CutPrefix(s, "whsec_")
	if !ok {
		return ""
	}
	k, err := base64.StdEncoding.DecodeString(rest)
	if err != nil || len(k) == 0 {
		return "a secret that starts with whsec_ must be non-empty base64 after it"
	}
	return ""
}
