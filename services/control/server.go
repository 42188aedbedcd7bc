// Package control is the gRPC run-control service: configure, start and
// stop runs, load menus and choose prescale sets at lumi-slice boundaries,
// report status and stream live per-rule rates. Mutating calls need a
// bearer token; the standard health service and server reflection are
// served alongside.
package control

import (
	"context"
	"crypto/subtle"
	"errors"
	"fmt"
	"log/slog"
	"runtime/debug"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/reflection"
	"google.golang.org/grpc/status"

	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/stack"
	"github.com/bunchsieve/bunchsieve/trigger"
)

// mutating lists the calls that need the token.
var mutating = map[string]bool{
	pb.RunControl_Configure_FullMethodName:      true,
	pb.RunControl_Start_FullMethodName:          true,
	pb.RunControl_Stop_FullMethodName:           true,
	pb.RunControl_LoadMenu_FullMethodName:       true,
	pb.RunControl_SetPrescaleSet_FullMethodName: true,
}

// Options set up the gRPC server.
type Options struct {
	// Token is the bearer token mutating calls must carry; it must not be
	// empty. It is never logged.
	Token string
	// Base is the run configuration Configure starts from.
	Base runconfig.Config
	// Creds secures the listener; nil means plaintext (loopback use).
	Creds credentials.TransportCredentials
	// Logger receives one line per refused or failed call; nil means
	// slog.Default().
	Logger *slog.Logger
}

// Server implements pb.RunControlServer over a stack.Controller.
type Server struct {
	pb.UnimplementedRunControlServer
	ctl  *stack.Controller
	base runconfig.Config
}

// NewGRPC returns a gRPC server with run control, health and reflection
// registered and the interceptors chained (panic recovery, logging, token
// check). Serve it on a listener; stop it with GracefulStop paired with a
// timed Stop.
func NewGRPC(ctl *stack.Controller, opts Options) (*grpc.Server, error) {
	if opts.Token == "" {
		return nil, errors.New("control: an empty token would let anyone steer the run")
	}
	if opts.Logger == nil {
		opts.Logger = slog.Default()
	}
	a := &auth{token: []byte(opts.Token)}
	l := &logging{log: opts.Logger}
	sopts := []grpc.ServerOption{
		grpc.ChainUnaryInterceptor(recoverUnary, l.unary, a.unary),
		grpc.ChainStreamInterceptor(recoverStream, a.stream),
	}
	if opts.Creds != nil {
		sopts = append(sopts, grpc.Creds(opts.Creds))
	}
	gs := grpc.NewServer(sopts...)
	pb.RegisterRunControlServer(gs, &Server{ctl: ctl, base: opts.Base})
	hs := health.NewServer()
	hs.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(pb.RunControl_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	healthpb.RegisterHealthServer(gs, hs)
	reflection.Register(gs)
	return gs, nil
}

type auth struct{ token []byte }

func (a *auth) check(ctx context.Context, method string) error {
	if !mutating[method] {
		return nil
	}
	md, _ := metadata.FromIncomingContext(ctx)
	for _, v := range md.Get("authorization") {
		// The scheme is case-insensitive (RFC 7235, section 2.1).
		scheme, tok, ok := strings.Cut(v, " ")
		if ok && strings.EqualFold(scheme, "Bearer") && subtle.ConstantTimeCompare([]byte(tok), a.token) == 1 {
			return nil
		}
	}
	return status.Error(codes.Unauthenticated, "control: this call needs the run-control token (authorization: Bearer ...)")
}

func (a *auth) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	if err := a.check(ctx, info.FullMethod); err != nil {
		return nil, err
	}
	return h(ctx, req)
}

func (a *auth) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) error {
	if err := a.check(ss.Context(), info.FullMethod); err != nil {
		return err
	}
	return h(srv, ss)
}

type logging struct{ log *slog.Logger }

func (l *logging) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	resp, err := h(ctx, req)
	if err != nil {
		l.log.Warn("run control call refused", "method", info.FullMethod, "code", status.Code(err).String(), "error", status.Convert(err).Message())
	} else if mutating[info.FullMethod] {
		l.log.Info("run control", "method", info.FullMethod)
	}
	return resp, err
}

func recoverUnary(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (resp any, err error) {
	defer func() {
		if r := recover(); r != nil {
			slog.Error("panic in run control", "method", info.FullMethod, "panic", r, "stack", string(debug.Stack()))
			err = status.Errorf(codes.Internal, "control: internal error in %s", info.FullMethod)
		}
	}()
	return h(ctx, req)
}

func recoverStream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) (err error) {
	defer func() {
		if r := recover(); r != nil {
			slog.Error("panic in run control", "method", info.FullMethod, "panic", r, "stack", string(debug.Stack()))
			err = status.Errorf(codes.Internal, "control: internal error in %s", info.FullMethod)
		}
	}()
	return h(srv, ss)
}

// code maps the controller's errors onto gRPC status codes.
func code(err error) error {
	switch {
	case err == nil:
		return nil
	case errors.Is(err, stack.ErrNotAllowed):
		return status.Error(codes.FailedPrecondition, err.Error())
	case errors.Is(err, stack.ErrInvalid):
		return status.Error(codes.InvalidArgument, err.Error())
	}
	return status.Error(codes.Internal, err.Error())
}

// Configure sets up the next run over the server's base configuration;
// zero fields keep the base values.
func (s *Server) Configure(_ context.Context, req *pb.ConfigureRequest) (*pb.RunStatus, error) {
	// What the request leaves out keeps what the controller has: the next
	// run's number (never one used already), the menu and the set chosen.
	rc, cur := s.base, stack.RunSettings{}
	if c, ok := s.ctl.Settings(); ok {
		rc, cur = c.Run, c
	}
	if req.Run != 0 {
		rc.Run = req.Run
	}
	if req.Sources != 0 {
		rc.Sources = int(req.Sources)
	}
	if req.RateHz != 0 {
		rc.RateHz = req.RateHz
	}
	if req.Seed != 0 {
		rc.Seed = req.Seed
	}
	settings := stack.RunSettings{Run: rc, Menu: cur.Menu, PrescaleSet: cur.PrescaleSet, Crossings: cur.Crossings, Duration: cur.Duration}
	// A duration beyond a year is a mistake, and NaN or one past 292
	// years would overflow time.Duration.
	if !(req.DurationS >= 0 && req.DurationS <= maxDurationS) || !(req.RateHz >= 0) {
		return nil, status.Errorf(codes.InvalidArgument, "control: duration %g s and rate %g Hz: want 0 <= duration <= %g s and a rate >= 0", req.DurationS, req.RateHz, float64(maxDurationS))
	}
	if req.Crossings != 0 {
		settings.Crossings = req.Crossings
	}
	if req.DurationS != 0 {
		settings.Duration = time.Duration(req.DurationS * float64(time.Second))
	}
	if req.Menu != "" {
		m, err := trigger.ParseMenu("menu sent by run control", []byte(req.Menu))
		if err != nil {
			return nil, status.Error(codes.InvalidArgument, err.Error())
		}
		// A new menu starts in its own active set unless told otherwise.
		settings.Menu, settings.PrescaleSet = m, ""
	}
	if req.PrescaleSet != "" {
		settings.PrescaleSet = req.PrescaleSet
	}
	if err := s.ctl.Configure(settings); err != nil {
		return nil, code(err)
	}
	return s.status(), nil
}

// maxDurationS bounds ConfigureRequest.duration_s: a year.
const maxDurationS = 365 * 24 * 3600

// Start begins the configured run.
func (s *Server) Start(context.Context, *pb.StartRequest) (*pb.RunStatus, error) {
	if err := s.ctl.Start(); err != nil {
		return nil, code(err)
	}
	return s.status(), nil
}

// Stop ends offering; the run drains and then reads ready.
func (s *Server) Stop(context.Context, *pb.StopRequest) (*pb.RunStatus, error) {
	if err := s.ctl.Stop(); err != nil {
		return nil, code(err)
	}
	return s.status(), nil
}

// LoadMenu validates a menu and makes it current from the next lumi slice.
func (s *Server) LoadMenu(_ context.Context, req *pb.LoadMenuRequest) (*pb.RunStatus, error) {
	if req.Menu == "" {
		return nil, status.Error(codes.InvalidArgument, "control: empty menu")
	}
	m, err := trigger.ParseMenu("menu sent by run control", []byte(req.Menu))
	if err != nil {
		return nil, status.Error(codes.InvalidArgument, err.Error())
	}
	if err := s.ctl.LoadMenu(m, req.PrescaleSet); err != nil {
		return nil, code(err)
	}
	return s.status(), nil
}

// SetPrescaleSet chooses the prescale set from the next lumi slice.
func (s *Server) SetPrescaleSet(_ context.Context, req *pb.SetPrescaleSetRequest) (*pb.RunStatus, error) {
	if req.PrescaleSet == "" {
		return nil, status.Error(codes.InvalidArgument, "control: empty prescale set name")
	}
	if err := s.ctl.SetPrescaleSet(req.PrescaleSet); err != nil {
		return nil, code(err)
	}
	return s.status(), nil
}

// Status reports the run.
func (s *Server) Status(context.Context, *pb.StatusRequest) (*pb.RunStatus, error) {
	return s.status(), nil
}

var phases = map[stack.Phase]pb.RunPhase{
	stack.Idle: pb.RunPhase_RUN_PHASE_IDLE, stack.Ready: pb.RunPhase_RUN_PHASE_READY, stack.Flowing: pb.RunPhase_RUN_PHASE_FLOWING,
	stack.Draining: pb.RunPhase_RUN_PHASE_DRAINING, stack.Faulted: pb.RunPhase_RUN_PHASE_FAULTED,
}

func (s *Server) status() *pb.RunStatus {
	st := s.ctl.Status()
	return &pb.RunStatus{
		Phase: phases[st.Phase], Run: st.Run, LumiSlice: st.LumiSlice, MenuHash: st.MenuHash, MenuName: st.MenuName,
		PrescaleSet: st.PrescaleSet, PendingMenuHash: st.PendingMenu, PendingPrescaleSet: st.PendingPrescaleSet,
		Crossings: st.Crossings, EventsBuilt: st.EventsBuilt, Accepted: st.Accepted, Detail: st.Detail,
		UptimeS: st.Uptime.Seconds(),
	}
}

// WatchRates streams per-rule rates at the requested interval until the
// client goes away.
func (s *Server) WatchRates(req *pb.WatchRatesRequest, stream grpc.ServerStreamingServer[pb.RateUpdate]) error {
	every := time.Duration(req.IntervalMs) * time.Millisecond
	if every == 0 {
		every = time.Second
	}
	if every < 50*time.Millisecond {
		return status.Error(codes.InvalidArgument, "control: interval below 50 ms")
	}
	r := stack.NewRates(s.ctl)
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		select {
		case <-stream.Context().Done():
			return nil
		case <-t.C:
			snap := r.Sample()
			up := &pb.RateUpdate{UnixNs: snap.At.UnixNano(), LumiSlice: snap.LumiSlice, AcceptedHz: snap.AcceptedHz}
			for _, rr := range snap.Rules {
				up.Rules = append(up.Rules, &pb.RuleRate{Rule: rr.Name, PassedHz: rr.PassedHz, AcceptedHz: rr.AcceptedHz})
			}
			if err := stream.Send(up); err != nil {
				return fmt.Errorf("control: send rates: %w", err)
			}
		}
	}
}
