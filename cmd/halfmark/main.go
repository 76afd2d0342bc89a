// Command halfmark runs Halfmark: the API, dashboard and worker (serve),
// each part alone (api, worker), migrations, tokens, imports, the analysis
// and control-chart tools, and the demo clinic. Run `halfmark help`.
package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args, os.Getenv, os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// env is what every subcommand gets: its arguments, the environment and
// the standard streams. Nothing reads globals.
type env struct {
	args   []string
	getenv func(string) string
	stdin  io.Reader
	stdout io.Writer
	stderr io.Writer
}

type command struct {
	name    string
	summary string
	run     func(ctx context.Context, e env) error
}

func commands() []command {
	return []command{
		{"demo", "load the invented demo clinic into a private database and serve it", cmdDemo},
		{"serve", "run the API, the dashboard and the worker in one process (the single-machine default)", cmdServe},
		{"api", "run the API and dashboard only (for scale-out; run workers separately)", cmdAPI},
		{"worker", "run the scheduled worker only (for scale-out)", cmdWorker},
		{"migrate", "apply database migrations and exit", cmdMigrate},
		{"token", "create, list or revoke API tokens: token create --name N --role R", cmdToken},
		{"user", "add a dashboard user: user add --email E --role R [--password-stdin]", cmdUser},
		{"import", "import records: import checks [--map FILE.toml] FILE, or import suggest FILE", cmdImport},
		{"export", "export checks in the long layout: export checks [--format csv|xlsx] FILE", cmdExport},
		{"analyze", "analyse raw data: analyze profile|image|picket FILE", cmdAnalyze},
		{"probe", "health check for containers: probe URL, or probe --database", cmdProbe},
		{"spc", "control-chart a series file: spc --method imr|ewma|cusum|trend FILE", cmdSPC},
	}
}

// exitUsage marks an error that is the user's (bad flags): exit code 2.
type exitUsage struct{ error }

func run(ctx context.Context, args []string, getenv func(string) string, stdin io.Reader, stdout, stderr io.Writer) int {
	if len(args) < 2 || args[1] == "help" || args[1] == "-h" || args[1] == "--help" {
		usage(stdout)
		if len(args) < 2 {
			return 2
		}
		return 0
	}
	for _, c := range commands() {
		if c.name == args[1] {
			err := c.run(ctx, env{args: args[2:], getenv: getenv, stdin: stdin, stdout: stdout, stderr: stderr})
			if err == nil {
				return 0
			}
			if err == errHelp {
				return 0
			}
			fmt.Fprintf(stderr, "halfmark %s: %v\n", c.name, err)
			if _, ok := err.(exitUsage); ok {
				return 2
			}
			return 1
		}
	}
	fmt.Fprintf(stderr, "halfmark: unknown command %q\n\n", args[1])
	usage(stderr)
	return 2
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "halfmark — field-edge QA for linear accelerators")
	fmt.Fprintln(w, "\nUsage: halfmark <command> [flags]   (halfmark <command> --help for its flags)")
	fmt.Fprintln(w, "\nCommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-9s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nResults support, and never replace, a qualified medical physicist; tolerances are set locally.")
}
