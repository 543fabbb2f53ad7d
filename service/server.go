package service

import (
	"context"
	"log/slog"
	"runtime/debug"
	"strings"
	"time"

	"go.opentelemetry.io/contrib/instrumentation/google.golang.org/grpc/otelgrpc"
	"go.opentelemetry.io/otel/metric"
	"go.opentelemetry.io/otel/trace"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/reflection"
	"google.golang.org/grpc/status"
)

// ServerOptions configure [NewGRPCServer].
type ServerOptions struct {
	Logger *slog.Logger
	// TracerProvider and MeterProvider instrument every RPC through otelgrpc; nil
	// means the global providers.
	TracerProvider trace.TracerProvider
	MeterProvider  metric.MeterProvider
	// MaxRecvBytes is the largest request message; 0 means 16 MiB.
	MaxRecvBytes int
}

// NewGRPCServer assembles the gRPC server in one place: the OpenTelemetry stats
// handler, the interceptor chain (recover outermost, then one log line per request),
// the voltcast services, the health service ([Health]: readiness includes a store
// ping) and server reflection. The returned health server starts SERVING; shutdown
// sets it to NOT_SERVING first.
func NewGRPCServer(svc *Service, opts ServerOptions) (*grpc.Server, *Health) {
	maxRecv := opts.MaxRecvBytes
	if maxRecv <= 0 {
		maxRecv = 16 << 20
	}
	var otelOpts []otelgrpc.Option
	if opts.TracerProvider != nil {
		otelOpts = append(otelOpts, otelgrpc.WithTracerProvider(opts.TracerProvider))
	}
	if opts.MeterProvider != nil {
		otelOpts = append(otelOpts, otelgrpc.WithMeterProvider(opts.MeterProvider))
	}
	log := opts.Logger
	srv := grpc.NewServer(
		grpc.StatsHandler(otelgrpc.NewServerHandler(otelOpts...)),
		grpc.MaxRecvMsgSize(maxRecv),
		grpc.ChainUnaryInterceptor(recoverUnary(log), logUnary(log)),
		grpc.ChainStreamInterceptor(recoverStream(log), logStream(log)),
	)
	svc.Register(srv)
	hs := NewHealth(svc)
	healthpb.RegisterHealthServer(srv, hs)
	reflection.Register(srv)
	return srv, hs
}

// errPanic is what a caller sees when a handler panicked: INTERNAL, no detail.
func errPanic() error {
	return build(&Error{Code: codes.Internal, Reason: ReasonInternal, Msg: "internal error"})
}

func recoverUnary(log *slog.Logger) grpc.UnaryServerInterceptor {
	return func(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (resp any, err error) {
		defer func() {
			if r := recover(); r != nil {
				log.ErrorContext(ctx, "panic in handler", "method", info.FullMethod, "panic", r, "stack", string(debug.Stack()))
				resp, err = nil, errPanic()
			}
		}()
		return handler(ctx, req)
	}
}

func recoverStream(log *slog.Logger) grpc.StreamServerInterceptor {
	return func(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) (err error) {
		defer func() {
			if r := recover(); r != nil {
				log.ErrorContext(ss.Context(), "panic in handler", "method", info.FullMethod, "panic", r, "stack", string(debug.Stack()))
				err = errPanic()
			}
		}()
		return handler(srv, ss)
	}
}

// logRequest writes the one log line of a request, with its trace id.
func logRequest(ctx context.Context, log *slog.Logger, method string, start time.Time, err error) {
	st := status.Convert(err)
	level := slog.LevelInfo
	if strings.HasPrefix(method, "/grpc.health.v1.") {
		level = slog.LevelDebug // probes every few seconds would drown the log
	}
	switch st.Code() {
	case codes.Internal, codes.Unknown, codes.DataLoss:
		level = slog.LevelError
	case codes.Unavailable, codes.DeadlineExceeded, codes.Aborted:
		level = slog.LevelWarn
	}
	attrs := []slog.Attr{
		slog.String("method", method),
		slog.String("code", st.Code().String()),
		slog.Float64("duration_ms", float64(time.Since(start).Microseconds())/1000),
	}
	if sc := trace.SpanContextFromContext(ctx); sc.HasTraceID() {
		attrs = append(attrs, slog.String("trace_id", sc.TraceID().String()), slog.String("span_id", sc.SpanID().String()))
	}
	if err != nil {
		attrs = append(attrs, slog.String("error", st.Message()))
	}
	log.LogAttrs(ctx, level, "rpc", attrs...)
}

func logUnary(log *slog.Logger) grpc.UnaryServerInterceptor {
	return func(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
		start := time.Now()
		resp, err := handler(ctx, req)
		logRequest(ctx, log, info.FullMethod, start, err)
		return resp, err
	}
}

func logStream(log *slog.Logger) grpc.StreamServerInterceptor {
	return func(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
		start := time.Now()
		err := handler(srv, ss)
		logRequest(ss.Context(), log, info.FullMethod, start, err)
		return err
	}
}
