package config

import (
	"fmt"
	"os"
	"slices"
	"sort"
	"strings"
)

// commandEnv are PLATEAU_* variables read by the commands themselves, not
// configuration keys (how a client finds the daemon).
var commandEnv = []string{"PLATEAU_SOCKET", "PLATEAU_URL", "PLATEAU_TOKEN"}

// EnvName is the environment variable that overrides a key: store.path is
// PLATEAU_STORE_PATH.
func EnvName(key string) string {
	return EnvPrefix + "_" + strings.ToUpper(strings.ReplaceAll(key, ".", "_"))
}

// envProblems notes which keys the environment sets, so that a problem with
// one names the variable rather than a line of the file, and warns about
// PLATEAU_* variables that set nothing (a typo there is otherwise silent).
func envProblems(p *Problems) {
	known := map[string]string{} // variable → key
	for key := range defaults() {
		known[EnvName(key)] = key
	}
	names := make([]string, 0, len(known))
	for n := range known {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, kv := range os.Environ() {
		name, val, _ := strings.Cut(kv, "=")
		if !strings.HasPrefix(name, EnvPrefix+"_") || slices.Contains(commandEnv, name) {
			continue
		}
		if key, ok := known[name]; ok {
			if val != "" { // empty counts as unset, as for viper
				p.env[key] = name
				p.envVal[key] = val
			}
			continue
		}
		msg := "matches no configuration key, so it changes nothing"
		if s := closest(name, names); s != "" {
			msg += fmt.Sprintf("; did you mean %s?", s)
		} else if strings.HasPrefix(name, EnvPrefix+"_INSTRUMENTS") || strings.HasPrefix(name, EnvPrefix+"_PROCEDURE_POINTS_") {
			msg += "; instruments and the entries of lists are set in the file only"
		}
		p.add(Problem{Env: name, Value: val, Msg: msg, Warning: true})
	}
}
