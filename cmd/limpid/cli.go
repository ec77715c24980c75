package main

import (
	"errors"
	"fmt"
	"io"
	"os"
	"reflect"
	"regexp"
	"strings"

	"github.com/urfave/cli/v2"

	"limpid/psf"
	"limpid/step"
)

// The command-line contract, applied to the whole command tree in one place
// (prepareCLI) so that every command and nested subcommand behaves alike
// (the quoted wording below is recalled from memory):
//
//   - --help and -h on any command, `limpid help [COMMAND...]` and
//     `limpid --version` print to standard output and exit 0. Source: GNU
//     Coding Standards 4.8.1 "--version" and 4.8.2 "--help": print "on
//     standard output, then exit successfully". Help is printed only when
//     asked for, so it never mixes with data on stdout (OUTPUT "-").
//   - Every usage error (unknown flag or command, a word where a number is
//     expected, a bad LIMPID_* value, a wrong argument count) exits 2 with
//     one stderr line "limpid: ..." ending in a hint to --help; no help
//     dump. Source: POSIX.1-2017 XCU 1.4 Utility Description Defaults
//     (diagnostic messages go to standard error; an error gives a non-zero
//     exit status) and the status above 1 for errors of utilities such as
//     cmp and diff (XCU cmp, diff: ">1 An error occurred"); the one-line
//     "see --help" hint is common practice, no source.
//   - Flags come before the operands. Source: POSIX.1-2017 XBD 12.1 Utility
//     Argument Syntax and 12.2 Utility Syntax Guidelines, Guideline 9: "All
//     options should precede operands on the command line."
//   - Every flag can be set from the environment: restore's flags (the main
//     job) from LIMPID_<FLAG>, every other command's from
//     LIMPID_<COMMAND>_<FLAG> (envName), so that one variable never means
//     two syntaxes.

func init() {
	// Help is a flag of limpid's own on every command (helpFlag), printed
	// to stdout by the command's Before; urfave/cli's built-in one writes
	// to App.Writer (stderr here) and takes `--help ARG` as a help topic.
	cli.HelpFlag = nil
}

// envCommand is the command whose flags keep the short LIMPID_<FLAG>
// variables.
const envCommand = "restore"

// envName is the environment variable of the flag named flag on the
// command path (command names below limpid, e.g. ["tiles", "pack"]).
func envName(path []string, flag string) string {
	parts := []string{"LIMPID"}
	if len(path) != 1 || path[0] != envCommand {
		parts = append(parts, path...)
	}
	parts = append(parts, flag)
	return strings.ToUpper(strings.ReplaceAll(strings.Join(parts, "_"), "-", "_"))
}

// errHelpShown stops a command after its help (or the version) was printed:
// exit 0, nothing on stderr.
var errHelpShown = errors.New("help shown")

// cliError is a command-line error whose message is final (hint included).
type cliError struct{ msg string }

func (e cliError) Error() string { return e.msg }

// hint is the pointer to a command's help that ends every usage error.
func hint(path []string) string {
	return fmt.Sprintf("(see '%s --help')", strings.Join(append([]string{"limpid"}, path...), " "))
}

func usageErrorf(path []string, format string, a ...any) error {
	return usageError{cliError{fmt.Sprintf(format, a...) + " " + hint(path)}}
}

// hinted adds the hint to err's message, keeping err for errors.Is/As.
type hinted struct {
	error
	hint string
}

func (h hinted) Error() string { return h.error.Error() + " " + h.hint }
func (h hinted) Unwrap() error { return h.error }

func helpFlag() cli.Flag {
	return &cli.BoolFlag{Name: "help", Aliases: []string{"h"}, Usage: "print this help to standard output and exit", DisableDefaultText: true}
}

// groupHelpTemplate and appHelpTemplate list subcommands without urfave's
// command categories (which exist only once a command has run), so that
// any command's help can be printed from anywhere.
var (
	groupHelpTemplate = strings.Replace(cli.SubcommandHelpTemplate, `{{template "visibleCommandCategoryTemplate" .}}`, `{{template "visibleCommandTemplate" .}}`, 1)
	appHelpTemplate   = strings.Replace(cli.AppHelpTemplate, `{{template "visibleCommandCategoryTemplate" .}}`, `{{template "visibleCommandTemplate" .}}`, 1)
)

// prepareCLI applies the contract above to app and every command below it.
// Help and the version go to stdout; argv is the command line (for naming
// the environment variable behind a bad value).
func prepareCLI(app *cli.App, stdout io.Writer, argv []string) {
	app.HideHelp, app.HideHelpCommand, app.HideVersion = true, true, true
	app.CustomAppHelpTemplate = appHelpTemplate
	app.Flags = append(app.Flags, helpFlag(),
		&cli.BoolFlag{Name: "version", Aliases: []string{"v"}, Usage: "print the version to standard output and exit", DisableDefaultText: true})
	app.OnUsageError = func(_ *cli.Context, err error, _ bool) error { return flagUsageError(nil, app.Flags, err) }
	app.Before = func(c *cli.Context) error {
		if c.Bool("help") {
			cli.HelpPrinter(stdout, appHelpTemplate, c.App)
			return errHelpShown
		}
		if c.Bool("version") {
			fmt.Fprintf(stdout, "%s version %s\n", c.App.Name, c.App.Version)
			return errHelpShown
		}
		return nil
	}
	app.Action = func(c *cli.Context) error { return missingCommand(nil, app.Commands, c.Args().Slice()) }
	for _, cmd := range app.Commands {
		prepareCommand(cmd, nil, stdout, argv)
	}
}

func prepareCommand(cmd *cli.Command, parent []string, stdout io.Writer, argv []string) {
	path := append(append([]string{}, parent...), cmd.Name)
	full := strings.Join(append([]string{"limpid"}, path...), " ")
	if len(parent) > 0 {
		// App.Setup prefixes the top-level commands' names itself.
		cmd.HelpName = full
	}
	cmd.HideHelp, cmd.HideHelpCommand = true, true
	for _, f := range cmd.Flags {
		setEnvVars(f, envName(path, f.Names()[0]))
	}
	cmd.Flags = append(cmd.Flags, helpFlag())
	flags := cmd.Flags
	cmd.OnUsageError = func(_ *cli.Context, err error, _ bool) error { return flagUsageError(path, flags, err) }
	before := cmd.Before
	cmd.Before = func(c *cli.Context) error {
		if c.Bool("help") {
			printHelp(stdout, cmd)
			return errHelpShown
		}
		if before != nil {
			return before(c)
		}
		return nil
	}
	if len(cmd.Subcommands) > 0 {
		cmd.CustomHelpTemplate = groupHelpTemplate
		cmd.UsageText = full + " COMMAND [command options] [arguments...]"
		subs := cmd.Subcommands
		cmd.Action = func(c *cli.Context) error {
			args := c.Args().Slice()
			if len(args) > 0 && args[0] == "help" {
				return helpTopic(stdout, cmd, path, args[1:])
			}
			return missingCommand(path, subs, args)
		}
		for _, sub := range cmd.Subcommands {
			prepareCommand(sub, path, stdout, argv)
		}
		return
	}
	cmd.CustomHelpTemplate = cli.CommandHelpTemplate
	action, operands := cmd.Action, strings.Fields(cmd.ArgsUsage)
	cmd.Action = func(c *cli.Context) error {
		if err := checkOperands(path, operands, c.Args().Slice()); err != nil {
			return err
		}
		err := action(c)
		if err != nil && exitCode(err) == exitUsage && strings.HasPrefix(errorText(err), "-") {
			// An error that names a flag first is about the command line.
			return hinted{err, envSource(path, errorText(err), argv) + hint(path)}
		}
		return err
	}
}

var reLeadingFlag = regexp.MustCompile(`^--([a-z0-9-]+)`)

// envSource is "(from LIMPID_...) " when the flag that msg starts with was
// not on the command line but set by its environment variable.
func envSource(path []string, msg string, argv []string) string {
	m := reLeadingFlag.FindStringSubmatch(msg)
	if m == nil {
		return ""
	}
	name := envName(path, m[1])
	if _, set := os.LookupEnv(name); !set {
		return ""
	}
	for _, a := range argv {
		a, _, _ = strings.Cut(a, "=")
		if a == "--"+m[1] || a == "-"+m[1] {
			return ""
		}
	}
	return "(from " + name + ") "
}

// setEnvVars sets the EnvVars field every urfave/cli flag type has.
func setEnvVars(f cli.Flag, name string) {
	v := reflect.ValueOf(f).Elem().FieldByName("EnvVars")
	if !v.IsValid() {
		panic(fmt.Sprintf("flag %s (%T) has no EnvVars", f.Names()[0], f))
	}
	v.Set(reflect.ValueOf([]string{name}))
}

func printHelp(w io.Writer, cmd *cli.Command) {
	cli.HelpPrinter(w, cmd.CustomHelpTemplate, cmd)
}

// helpTopic prints the help of group's subcommand named by args[0] (the
// group's own help without args): `limpid tiles help pack`.
func helpTopic(w io.Writer, group *cli.Command, path, args []string) error {
	if len(args) == 0 {
		printHelp(w, group)
		return errHelpShown
	}
	if sub := group.Command(args[0]); sub != nil {
		printHelp(w, sub)
		return errHelpShown
	}
	return missingCommand(path, group.Subcommands, args)
}

// missingCommand is the error for a group (or limpid itself) run without a
// command or with an unknown one.
func missingCommand(path []string, cmds []*cli.Command, args []string) error {
	var names []string
	for _, c := range cmds {
		if !c.Hidden {
			names = append(names, c.Name)
		}
	}
	list := strings.Join(names, ", ")
	switch {
	case len(args) > 0:
		return usageErrorf(path, "unknown command %q; commands: %s", strings.Join(append(append([]string{}, path...), args[0]), " "), list)
	case len(path) == 0:
		return usageErrorf(path, "no command given; commands: %s", list)
	}
	return usageErrorf(path, "%s needs a command: %s", strings.Join(path, " "), list)
}

// checkOperands checks the operand count against the command's ArgsUsage
// (e.g. "INPUT OUTPUT"; a command without ArgsUsage takes none; a last
// "[NAME...]" takes any number).
func checkOperands(path []string, names, got []string) error {
	if len(got) == len(names) {
		return nil
	}
	if n := len(names); n > 0 && strings.HasPrefix(names[n-1], "[") && strings.HasSuffix(names[n-1], "...]") {
		// A trailing [NAME...] takes any number of operands.
		if len(got) >= n-1 {
			return nil
		}
		names = names[:n-1]
	}
	cmd := strings.Join(path, " ")
	shown := got
	if len(shown) > 4 {
		shown = append(append([]string{}, shown[:4]...), "...")
	}
	gotText := fmt.Sprintf("got %d arguments (%s)", len(got), strings.Join(shown, " "))
	switch len(got) {
	case 0:
		gotText = "got none"
	case 1:
		gotText = fmt.Sprintf("got 1 argument (%s)", got[0])
	}
	var want string
	switch len(names) {
	case 0:
		return usageErrorf(path, "%s takes no arguments, %s", cmd, gotText)
	case 1:
		want = "one " + names[0]
	default:
		want = strings.Join(names[:len(names)-1], ", ") + " and " + names[len(names)-1]
	}
	msg := fmt.Sprintf("%s needs %s, %s", cmd, want, gotText)
	for _, a := range got[min(len(names), len(got)):] {
		if strings.HasPrefix(a, "-") && a != "-" {
			msg += fmt.Sprintf("; flags go before the arguments (%s came after them)", a)
			break
		}
	}
	return usageErrorf(path, "%s", msg)
}

// The texts of Go's flag package and of urfave/cli v2's environment
// parsing that flagUsageError rewrites.
var (
	reUndefined = regexp.MustCompile(`^flag provided but not defined: -(.+)$`)
	reNoValue   = regexp.MustCompile(`^flag needs an argument: -(.+)$`)
	reBadValue  = regexp.MustCompile(`^invalid (?:boolean )?value "(.*)" for (?:flag )?-([^:]+): (.*)$`)
	reBadSyntax = regexp.MustCompile(`^bad flag syntax: (.*)$`)
	reEnv       = regexp.MustCompile(`^could not parse "(.*)" .*from environment variable "([^"]+)" for flag ([^:]+): (.*)$`)
)

// flagUsageError turns a flag parsing error of the command at path into
// one concise line.
func flagUsageError(path []string, flags []cli.Flag, err error) error {
	msg := err.Error()
	switch m := (*regexp.Regexp).FindStringSubmatch; {
	case m(reUndefined, msg) != nil:
		return usageErrorf(path, "unknown flag %s", dashed(m(reUndefined, msg)[1]))
	case m(reNoValue, msg) != nil:
		return usageErrorf(path, "%s needs a value", dashed(m(reNoValue, msg)[1]))
	case m(reBadValue, msg) != nil:
		s := m(reBadValue, msg)
		return usageErrorf(path, "%s %q: %s", dashed(s[2]), s[1], expected(flags, s[2], s[3]))
	case m(reBadSyntax, msg) != nil:
		return usageErrorf(path, "bad flag syntax %q", m(reBadSyntax, msg)[1])
	case m(reEnv, msg) != nil:
		s := m(reEnv, msg)
		return usageErrorf(path, "%s=%q (%s): %s", s[2], s[1], dashed(s[3]), expected(flags, s[3], s[4]))
	}
	return usageErrorf(path, "%s", msg)
}

// dashed is a flag name as typed: -h, --tile.
func dashed(name string) string {
	if len(name) == 1 {
		return "-" + name
	}
	return "--" + name
}

// expected says what the flag named name takes, from its type.
func expected(flags []cli.Flag, name, reason string) string {
	out := ""
	if strings.Contains(reason, "out of range") {
		out = "out of range, "
	}
	for _, f := range flags {
		for _, n := range f.Names() {
			if n != name {
				continue
			}
			switch f.(type) {
			case *cli.IntFlag, *cli.Int64Flag:
				return out + "expected a whole number"
			case *cli.UintFlag, *cli.Uint64Flag:
				return out + "expected a whole number >= 0"
			case *cli.Float64Flag:
				return out + "expected a number"
			case *cli.BoolFlag:
				return "expected true or false"
			}
		}
	}
	return reason
}

// errorText is err's message as run prints it: configuration fields shown
// as the flags that set them, and the package sentinels' texts ("bad
// parameter: ", "psf: bad specification: ", "psf: invalid kernel: ")
// left out: the message names the flag or file instead.
func errorText(err error) string {
	msg := flagText(err)
	for _, s := range []error{step.ErrConfig, psf.ErrSpec, psf.ErrKernel} {
		if errors.Is(err, s) {
			msg = strings.Replace(msg, s.Error()+": ", "", 1)
		}
	}
	return strings.ReplaceAll(strings.TrimSpace(msg), "\n", " ")
}
