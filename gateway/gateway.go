// Package gateway serves the voltcast API as REST/JSON: a grpc-gateway mux that dials
// the gRPC server over loopback, the generated OpenAPI document at /openapi.json, and
// /healthz answered by the gRPC health service, so that REST and gRPC report the same
// health. It holds no business logic.
//
// # JSON
//
// The protojson options are set once, in [MarshalOptions] and [UnmarshalOptions], and
// covered by golden tests:
//
//   - field names are the standard lowerCamelCase JSON names (stateOfCharge), as the
//     AIPs use; the proto names are accepted on input too (protojson always does);
//   - default values are emitted (EmitDefaultValues): a state of charge of 0 appears
//     as 0 rather than vanishing, so a client never has to know proto3's zero rules.
//     Unset message fields are still omitted, never null;
//   - enums are their names; int64 values are JSON strings (protojson's rule);
//   - unknown fields in a request are an error (DiscardUnknown false): HTTP 400, so a
//     misspelt field name never silently does nothing.
//
// # Errors
//
// A failed call answers with the HTTP status grpc-gateway maps from the gRPC code
// (runtime.HTTPStatusFromCode: INVALID_ARGUMENT → 400, NOT_FOUND → 404, ...) and a body
// {"code": <gRPC code>, "message": ..., "details": [...]} holding the google.rpc error
// details (ErrorInfo, BadRequest, ...) with their "@type". A request body over the
// configured limit is 413 with the same body shape.
//
// Errors the gateway raises itself (a body that is not valid JSON or names an unknown
// field, a malformed query parameter, an unknown path, an unreachable gRPC server)
// get the same details as the service's: always a google.rpc.ErrorInfo (domain
// voltcast.dev; reason INVALID_JSON for the body, INVALID_FIELD for a query or path
// parameter, UNKNOWN_PATH, METHOD_NOT_ALLOWED, or the gRPC code's name), and for
// INVALID_ARGUMENT a google.rpc.BadRequest naming the field (the JSON or query field
// name when it is known, else "body"). protojson's messages are normalised (it
// randomises their spaces on purpose), so the bodies are stable.
//
// # Health
//
// GET /healthz is readiness: it calls the gRPC health service, which pings the store
// (cached for a second). GET /livez is liveness: 200 whenever the process serves HTTP,
// touching nothing.
package gateway

import (
	"context"
	_ "embed"
	"errors"
	"fmt"
	"net/http"
	"regexp"
	"strings"

	"github.com/grpc-ecosystem/grpc-gateway/v2/runtime"
	"go.opentelemetry.io/contrib/instrumentation/google.golang.org/grpc/otelgrpc"
	"go.opentelemetry.io/contrib/instrumentation/net/http/otelhttp"
	"go.opentelemetry.io/otel/metric"
	"go.opentelemetry.io/otel/trace"
	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/protoadapt"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// OpenAPI is the generated OpenAPI (v2) document of the API, served at /openapi.json.
//
//go:embed openapi/voltcast.swagger.json
var OpenAPI []byte

// errorDomain is the google.rpc.ErrorInfo domain of the API (service.ErrorDomain).
const errorDomain = "voltcast.dev"

// MarshalOptions are the protojson options of every JSON response; see the package doc.
var MarshalOptions = protojson.MarshalOptions{
	UseProtoNames:     false,
	UseEnumNumbers:    false,
	EmitDefaultValues: true,
}

// UnmarshalOptions are the protojson options of every JSON request; see the package doc.
var UnmarshalOptions = protojson.UnmarshalOptions{DiscardUnknown: false}

// Options configure a [Gateway].
type Options struct {
	// GRPCAddress is the gRPC server to dial (host:port), normally on loopback.
	// Required.
	GRPCAddress string
	// MaxBodyBytes is the largest request body; 0 means 32 MiB.
	MaxBodyBytes int64
	// TracerProvider and MeterProvider instrument the HTTP side (otelhttp) and the
	// gateway's gRPC client (otelgrpc). nil means the global providers.
	TracerProvider trace.TracerProvider
	MeterProvider  metric.MeterProvider
	// Routes are extra handlers by ServeMux pattern, e.g. "GET /metrics".
	Routes map[string]http.Handler
	// DialOptions are added to the gateway's gRPC client (tests use them).
	DialOptions []grpc.DialOption
}

// Gateway is the REST gateway. Close it to release its gRPC client connection.
type Gateway struct {
	handler http.Handler
	conn    *grpc.ClientConn
}

// New builds the gateway and its client connection (which connects lazily).
func New(ctx context.Context, opts Options) (*Gateway, error) {
	if opts.GRPCAddress == "" {
		return nil, errors.New("gateway: a gRPC address is required")
	}
	maxBody := opts.MaxBodyBytes
	if maxBody <= 0 {
		maxBody = 32 << 20
	}
	var cliOpts []otelgrpc.Option
	if opts.TracerProvider != nil {
		cliOpts = append(cliOpts, otelgrpc.WithTracerProvider(opts.TracerProvider))
	}
	if opts.MeterProvider != nil {
		cliOpts = append(cliOpts, otelgrpc.WithMeterProvider(opts.MeterProvider))
	}
	dial := append([]grpc.DialOption{
		grpc.WithTransportCredentials(insecure.NewCredentials()),
		// The client handler carries the trace context from the HTTP span to the gRPC
		// server, so one REST call is one trace.
		grpc.WithStatsHandler(otelgrpc.NewClientHandler(cliOpts...)),
		grpc.WithDefaultCallOptions(grpc.MaxCallRecvMsgSize(64 << 20)),
	}, opts.DialOptions...)
	conn, err := grpc.NewClient(opts.GRPCAddress, dial...)
	if err != nil {
		return nil, fmt.Errorf("gateway: dialing %s: %w", opts.GRPCAddress, err)
	}
	mux := NewServeMux(healthpb.NewHealthClient(conn))
	for _, reg := range []func(context.Context, *runtime.ServeMux, *grpc.ClientConn) error{
		pb.RegisterBatteryTypeServiceHandler,
		pb.RegisterBatteryServiceHandler,
		pb.RegisterTelemetryServiceHandler,
		pb.RegisterForecastServiceHandler,
		pb.RegisterCalibrationServiceHandler,
	} {
		if err := reg(ctx, mux, conn); err != nil {
			conn.Close()
			return nil, fmt.Errorf("gateway: registering handlers: %w", err)
		}
	}
	root := http.NewServeMux()
	root.HandleFunc("GET /openapi.json", serveOpenAPI)
	root.HandleFunc("GET /livez", serveLive)
	for pattern, h := range opts.Routes {
		root.Handle(pattern, h)
	}
	root.Handle("/", limitBody(mux, maxBody))
	var otelOpts []otelhttp.Option
	if opts.TracerProvider != nil {
		otelOpts = append(otelOpts, otelhttp.WithTracerProvider(opts.TracerProvider))
	}
	if opts.MeterProvider != nil {
		otelOpts = append(otelOpts, otelhttp.WithMeterProvider(opts.MeterProvider))
	}
	otelOpts = append(otelOpts, otelhttp.WithSpanNameFormatter(func(_ string, r *http.Request) string {
		return r.Method + " " + r.URL.Path
	}))
	return &Gateway{handler: otelhttp.NewHandler(root, "gateway", otelOpts...), conn: conn}, nil
}

// NewServeMux returns the grpc-gateway mux with this package's JSON options, error
// handling and /healthz (answered by the gRPC health service through hc). It has no
// API handlers registered yet.
func NewServeMux(hc healthpb.HealthClient) *runtime.ServeMux {
	return runtime.NewServeMux(
		runtime.WithMarshalerOption(runtime.MIMEWildcard, &runtime.JSONPb{
			MarshalOptions:   MarshalOptions,
			UnmarshalOptions: UnmarshalOptions,
		}),
		runtime.WithHealthzEndpoint(hc),
		runtime.WithErrorHandler(errorHandler),
		runtime.WithRoutingErrorHandler(routingErrorHandler),
	)
}

// Patterns of the errors grpc-gateway raises while reading a request.
var (
	reUnknownField = regexp.MustCompile(`unknown field "([^"]+)"`)
	reParseField   = regexp.MustCompile(`^(?:parsing (?:field|list|map key|map value)|too many values for field|duplicate field|field already set for oneof) "?([^":]+)"?`)
	reTypeMismatch = regexp.MustCompile(`type mismatch, parameter: ([^,]+)`)
)

// errorHandler writes every error with the service's detail conventions; see the
// package doc. Statuses that already carry an ErrorInfo (all the service's) pass
// unchanged.
func errorHandler(ctx context.Context, mux *runtime.ServeMux, m runtime.Marshaler, w http.ResponseWriter, r *http.Request, err error) {
	st := status.Convert(err)
	for _, d := range st.Details() {
		if _, ok := d.(*errdetails.ErrorInfo); ok {
			runtime.DefaultHTTPErrorHandler(ctx, mux, m, w, r, err)
			return
		}
	}
	msg := strings.ReplaceAll(st.Message(), "\u00a0", " ")
	if strings.Contains(msg, "http: request body too large") {
		st := status.New(codes.InvalidArgument, "request body exceeds the limit")
		if d, err := st.WithDetails(&errdetails.ErrorInfo{Domain: errorDomain, Reason: "REQUEST_TOO_LARGE"}); err == nil {
			st = d
		}
		writeStatus(w, http.StatusRequestEntityTooLarge, st)
		return
	}
	reason := st.Code().String()
	details := []protoadapt.MessageV1{}
	if st.Code() == codes.InvalidArgument {
		field, reason := "body", "INVALID_JSON"
		switch {
		case reUnknownField.MatchString(msg):
			field = reUnknownField.FindStringSubmatch(msg)[1]
			msg = "unknown field (field names are the lowerCamelCase or proto names of /openapi.json)"
		case reParseField.MatchString(msg):
			field, reason = reParseField.FindStringSubmatch(msg)[1], "INVALID_FIELD"
		case reTypeMismatch.MatchString(msg):
			field, reason = strings.TrimSpace(reTypeMismatch.FindStringSubmatch(msg)[1]), "INVALID_FIELD"
		}
		details = append(details, &errdetails.ErrorInfo{Domain: errorDomain, Reason: reason},
			&errdetails.BadRequest{FieldViolations: []*errdetails.BadRequest_FieldViolation{{Field: field, Description: msg}}})
		msg = "invalid request: " + field + ": " + msg
	} else {
		details = append(details, &errdetails.ErrorInfo{Domain: errorDomain, Reason: upperSnake(reason)})
	}
	nst := status.New(st.Code(), msg)
	if d, err := nst.WithDetails(details...); err == nil {
		nst = d
	}
	runtime.DefaultHTTPErrorHandler(ctx, mux, m, w, r, nst.Err())
}

// routingErrorHandler answers requests that match no route, with an ErrorInfo.
func routingErrorHandler(ctx context.Context, mux *runtime.ServeMux, m runtime.Marshaler, w http.ResponseWriter, r *http.Request, httpStatus int) {
	code, reason, msg := codes.Internal, "INTERNAL", "unexpected routing error"
	switch httpStatus {
	case http.StatusNotFound:
		code, reason, msg = codes.NotFound, "UNKNOWN_PATH", "no API method at "+r.Method+" "+r.URL.Path+" (see /openapi.json)"
	case http.StatusMethodNotAllowed:
		code, reason, msg = codes.Unimplemented, "METHOD_NOT_ALLOWED", "method "+r.Method+" not allowed on "+r.URL.Path
	case http.StatusBadRequest:
		code, reason, msg = codes.InvalidArgument, "INVALID_JSON", http.StatusText(httpStatus)
	}
	st := status.New(code, msg)
	if d, err := st.WithDetails(&errdetails.ErrorInfo{Domain: errorDomain, Reason: reason}); err == nil {
		st = d
	}
	runtime.DefaultHTTPErrorHandler(ctx, mux, m, w, r, st.Err())
}

// upperSnake turns a gRPC code's Go name ("NotFound") into its canonical name
// ("NOT_FOUND").
func upperSnake(s string) string {
	var b strings.Builder
	for i, c := range s {
		if i > 0 && 'A' <= c && c <= 'Z' {
			b.WriteByte('_')
		}
		b.WriteRune(c)
	}
	return strings.ToUpper(b.String())
}

// Handler returns the gateway's HTTP handler.
func (g *Gateway) Handler() http.Handler { return g.handler }

// Close closes the gateway's gRPC client connection.
func (g *Gateway) Close() error { return g.conn.Close() }

// serveLive is liveness: it answers whenever the process serves HTTP and touches no
// dependency.
func serveLive(w http.ResponseWriter, _ *http.Request) {
	w.Header().Set("Content-Type", "application/json")
	w.Write([]byte(`{"status":"SERVING"}` + "\n"))
}

func serveOpenAPI(w http.ResponseWriter, _ *http.Request) {
	w.Header().Set("Content-Type", "application/json")
	w.Write(OpenAPI)
}

// limitBody answers 413 for a body declared larger than limit and caps the body read
// at limit (a chunked body that runs over fails to decode: 400).
func limitBody(next http.Handler, limit int64) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.ContentLength > limit {
			st := status.Newf(codes.InvalidArgument, "request body of %d bytes exceeds the limit of %d bytes", r.ContentLength, limit)
			if d, err := st.WithDetails(&errdetails.ErrorInfo{Domain: errorDomain, Reason: "REQUEST_TOO_LARGE"}); err == nil {
				st = d
			}
			writeStatus(w, http.StatusRequestEntityTooLarge, st)
			return
		}
		r.Body = http.MaxBytesReader(w, r.Body, limit)
		next.ServeHTTP(w, r)
	})
}

// writeStatus writes a status as grpc-gateway would, but with an explicit HTTP code.
func writeStatus(w http.ResponseWriter, code int, st *status.Status) {
	m := &runtime.JSONPb{MarshalOptions: MarshalOptions}
	b, err := m.Marshal(st.Proto())
	if err != nil {
		http.Error(w, st.Message(), code)
		return
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	w.Write(b)
}
