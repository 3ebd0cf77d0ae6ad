package main

import (
	"flag"
	"fmt"
	"io"
	"os"
	"strings"

	"discrimen/api"
)

func init() { extraCommands["key"] = cmdKey }

// cmdKey handles `discrimen key add NAME --keys FILE`: it makes a random
// key, prints it once on stdout and appends only its SHA-256 hash to FILE.
func cmdKey(args []string, stdout, stderr io.Writer) int {
	usage := func() {
		fmt.Fprintln(stderr, "usage: discrimen key add NAME --keys FILE\n\nMakes an API key for NAME, prints it once and appends its SHA-256 hash to FILE.\nNAME is 1-64 letters, digits, '.', '_' or '-'; studies submitted with the key belong to NAME.")
	}
	if len(args) == 0 || args[0] != "add" {
		usage()
		return 2
	}
	fs := flag.NewFlagSet("key add", flag.ContinueOnError)
	fs.SetOutput(stderr)
	keys := fs.String("keys", os.Getenv(envKeys), "keys `FILE` to append to (default $"+envKeys+")")
	fs.Usage = usage
	// NAME may come before or after the flags.
	rest := args[1:]
	name := ""
	if len(rest) > 0 && !strings.HasPrefix(rest[0], "-") {
		name, rest = rest[0], rest[1:]
	}
	if err := fs.Parse(rest); err != nil {
		return 2
	}
	if name == "" && fs.NArg() > 0 {
		name = fs.Arg(0)
	}
	if name == "" || *keys == "" || fs.NArg() > 1 || (fs.NArg() == 1 && name != fs.Arg(0)) {
		usage()
		return 2
	}
	if !api.ValidKeyName(name) {
		fmt.Fprintf(stderr, "discrimen key add: name %q: use 1-64 letters, digits, '.', '_' or '-'\n", name)
		return 2
	}
	key, hash := api.NewKey()
	if err := api.AppendKey(*keys, name, hash); err != nil {
		fmt.Fprintln(stderr, "discrimen key add:", err)
		return 1
	}
	fmt.Fprintln(stdout, key)
	fmt.Fprintf(stderr, "discrimen key add: key %q added to %s; it is shown only this once, so store it now\n", name, *keys)
	return 0
}
