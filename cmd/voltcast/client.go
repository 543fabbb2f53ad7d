package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"regexp"
	"slices"
	"strings"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"
)

// Client mode: the subcommands that call a running voltcastd over gRPC share the
// flags and helpers in this file. The server is given by --server ADDR, falling back to
// the environment variable VOLTCAST_SERVER; the connection is plaintext gRPC (put TLS
// in front of voltcastd with a proxy when the network is not trusted).

// envServer names the environment variable that holds the default server address.
const envServer = "VOLTCAST_SERVER"

// lookupEnv reads the environment; tests use t.Setenv.
var lookupEnv = os.LookupEnv

// clientFlags are the flags of every client subcommand.
type clientFlags struct {
	server  *string
	timeout *time.Duration
}

func addClientFlags(fs *flag.FlagSet) *clientFlags {
	def, _ := lookupEnv(envServer)
	return &clientFlags{
		server:  fs.String("server", def, "gRPC address (host:port) of a running voltcastd (env "+envServer+")"),
		timeout: fs.Duration("timeout", 30*time.Second, "give up on each call after this long"),
	}
}

// dial connects to the server. The connection is lazy: an unreachable server shows in
// the first call's error.
func (c *clientFlags) dial() (*grpc.ClientConn, error) {
	if *c.server == "" {
		return nil, fmt.Errorf("%w: --server ADDR (or %s) is required: the gRPC address of a running voltcastd", errUsage, envServer)
	}
	if *c.timeout <= 0 {
		return nil, fmt.Errorf("%w: --timeout must be positive, got %s", errUsage, *c.timeout)
	}
	conn, err := grpc.NewClient(*c.server, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		return nil, fmt.Errorf("%w: --server %q: %v", errUsage, *c.server, err)
	}
	return conn, nil
}

// nameAndDial parses a subcommand's flags and its NAME argument, resolves the name in
// collection, and connects to the server. The caller closes the connection.
func (c *clientFlags) nameAndDial(fs *flag.FlagSet, args []string, collection string) (string, *grpc.ClientConn, error) {
	arg, err := parseWithName(fs, args, "NAME")
	if err != nil {
		return "", nil, err
	}
	name, err := resourceName(collection, arg)
	if err != nil {
		return "", nil, err
	}
	conn, err := c.dial()
	if err != nil {
		return "", nil, err
	}
	return name, conn, nil
}

// call runs one RPC with the configured timeout and turns its error into [rpcError].
func call[Req, Resp any](ctx context.Context, c *clientFlags, rpc func(context.Context, Req, ...grpc.CallOption) (Resp, error), req Req) (Resp, error) {
	ctx, cancel := context.WithTimeout(ctx, *c.timeout)
	defer cancel()
	resp, err := rpc(ctx, req)
	if err != nil {
		return resp, rpcError(err)
	}
	return resp, nil
}

// rpcError renders a gRPC error on one line: the code, the server's message, and each
// field violation of a google.rpc.BadRequest ("field: why") or precondition failure.
func rpcError(err error) error {
	st, ok := status.FromError(err)
	if !ok {
		return err
	}
	var extra []string
	add := func(field, desc string) {
		s := desc
		if field != "" {
			s = field + ": " + desc
		}
		if !slices.Contains(extra, s) && !strings.Contains(st.Message(), s) {
			extra = append(extra, s)
		}
	}
	for _, d := range st.Details() {
		switch d := d.(type) {
		case *errdetails.BadRequest:
			for _, v := range d.GetFieldViolations() {
				add(v.GetField(), v.GetDescription())
			}
		case *errdetails.PreconditionFailure:
			for _, v := range d.GetViolations() {
				add(v.GetSubject(), v.GetDescription())
			}
		}
	}
	msg := st.Message()
	if len(extra) > 0 { // the message counts the violations it leaves out; list them
		msg = andMore.ReplaceAllString(msg, "")
	}
	return errors.New(strings.Join(append([]string{codeText(st.Code().String()) + ": " + msg}, extra...), "; "))
}

// andMore matches the server's count of violations left out of a message.
var andMore = regexp.MustCompile(` \(and \d+ more\)$`)

// codeText turns a gRPC code name ("NotFound") into its canonical spelling
// ("NOT_FOUND").
func codeText(name string) string {
	if name == "Canceled" {
		return "CANCELLED"
	}
	var b strings.Builder
	for i, r := range name {
		if i > 0 && r >= 'A' && r <= 'Z' {
			b.WriteByte('_')
		}
		b.WriteRune(r)
	}
	return strings.ToUpper(b.String())
}

// writeProtoJSON prints m as indented JSON with the API's field names, as the REST
// gateway does.
func writeProtoJSON(w io.Writer, m proto.Message) error {
	b, err := protojson.MarshalOptions{Multiline: true, Indent: "  "}.Marshal(m)
	if err != nil {
		return err
	}
	_, err = fmt.Fprintf(w, "%s\n", b)
	return err
}

// resourceName accepts "batteries/x" or just "x" for a collection, and returns the
// full resource name.
func resourceName(collection, s string) (string, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return "", fmt.Errorf("%w: a %s name is required", errUsage, strings.TrimSuffix(collection, "s"))
	}
	if strings.HasPrefix(s, collection+"/") {
		return s, nil
	}
	if strings.Contains(s, "/") {
		return "", fmt.Errorf("%w: %q is not a name in %s", errUsage, s, collection)
	}
	return collection + "/" + s, nil
}

// parseWithName parses a subcommand's flags and one positional argument, which may come
// before or after the flags ("get X --json" and "get --json X").
func parseWithName(fs *flag.FlagSet, args []string, what string) (string, error) {
	var name string
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		name, args = args[0], args[1:]
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return "", err
		}
		return "", fmt.Errorf("%w: %v", errUsage, err)
	}
	rest := fs.Args()
	if name == "" && len(rest) > 0 {
		name, rest = rest[0], rest[1:]
	}
	if len(rest) > 0 {
		return "", fmt.Errorf("%w: unexpected argument %q", errUsage, rest[0])
	}
	if name == "" {
		return "", fmt.Errorf("%w: %s is required", errUsage, what)
	}
	return name, nil
}

// subcommands dispatches "voltcast NAME VERB ..." to the verb's function.
func subcommands(name string, verbs map[string]func(ctx context.Context, args []string, stdout, stderr io.Writer) error, order []string) func(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	return func(ctx context.Context, args []string, stdout, stderr io.Writer) error {
		if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
			fmt.Fprintf(stderr, "usage: voltcast %s <%s> [flags] --server ADDR\n", name, strings.Join(order, "|"))
			fmt.Fprintf(stderr, "Run voltcast %s <verb> -h for the flags of each.\n", name)
			if len(args) == 0 {
				return fmt.Errorf("%w: a verb is required (%s)", errUsage, strings.Join(order, ", "))
			}
			return flag.ErrHelp
		}
		f, ok := verbs[args[0]]
		if !ok {
			return fmt.Errorf("%w: unknown verb %q (want %s)", errUsage, args[0], strings.Join(order, ", "))
		}
		return f(ctx, args[1:], stdout, stderr)
	}
}

// pct formats a fraction as a percentage.
func pct(f float64) string { return fmt.Sprintf("%.1f %%", 100*f) }
