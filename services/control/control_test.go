package control

import (
	"context"
	"fmt"
	"google.golang.org/grpc/metadata"
	"io/fs"
	"math"
	"net"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	reflectpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/grpc/test/bufconn"

	"github.com/bunchsieve/bunchsieve/examples"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
	"github.com/bunchsieve/bunchsieve/services/runconfig"
	"github.com/bunchsieve/bunchsieve/services/stack"
)

const token = "test-token-7f3a"

type bearer string

func (b bearer) GetRequestMetadata(context.Context, ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + string(b)}, nil
}
func (bearer) RequireTransportSecurity() bool { return false }

// serve starts run control over an in-memory listener and returns a client
// with the token and one without.
func serve(t *testing.T) (with, without *grpc.ClientConn, ctl *stack.Controller) {
	t.Helper()
	host, err := stack.NewHost(stack.HostOptions{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(host.Close)
	ctl = stack.NewController(host)
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
		defer cancel()
		ctl.Close(ctx)
	})
	base := runconfig.Default()
	base.RateHz = 20000
	// Short lumi slices (one orbit = 2400 crossings, about a tenth of a
	// second at this rate, a few seconds under the race detector) so
	// boundaries come quickly.
	base.LumiSliceOrbits = 1
	gs, err := NewGRPC(ctl, Options{Token: token, Base: base})
	if err != nil {
		t.Fatal(err)
	}
	ln := bufconn.Listen(1 << 20)
	go gs.Serve(ln)
	t.Cleanup(gs.Stop)
	dial := func(extra ...grpc.DialOption) *grpc.ClientConn {
		opts := append([]grpc.DialOption{
			grpc.WithContextDialer(func(context.Context, string) (net.Conn, error) { return ln.Dial() }),
			grpc.WithTransportCredentials(insecure.NewCredentials()),
		}, extra...)
		cc, err := grpc.NewClient("passthrough:///bufconn", opts...)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { cc.Close() })
		return cc
	}
	return dial(grpc.WithPerRPCCredentials(bearer(token))), dial(), ctl
}

func wantCode(t *testing.T, err error, c codes.Code, what string) {
	t.Helper()
	if status.Code(err) != c {
		t.Fatalf("%s: got %v, want %v", what, err, c)
	}
	if c != codes.OK && status.Convert(err).Message() == "" {
		t.Fatalf("%s: refusal without a message", what)
	}
}

func waitPhase(t *testing.T, c pb.RunControlClient, want pb.RunPhase) *pb.RunStatus {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		st, err := c.Status(context.Background(), &pb.StatusRequest{})
		if err != nil {
			t.Fatal(err)
		}
		if st.Phase == want {
			return st
		}
		if time.Now().After(deadline) {
			t.Fatalf("phase %v, want %v (%s)", st.Phase, want, st.Detail)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func TestRunControlOverGRPC(t *testing.T) {
	with, without, _ := serve(t)
	c, anon := pb.NewRunControlClient(with), pb.NewRunControlClient(without)
	ctx := context.Background()

	// Health and reflection answer.
	h, err := healthpb.NewHealthClient(without).Check(ctx, &healthpb.HealthCheckRequest{Service: pb.RunControl_ServiceDesc.ServiceName})
	if err != nil || h.Status != healthpb.HealthCheckResponse_SERVING {
		t.Fatalf("health: %v %v", h, err)
	}
	rs, err := reflectpb.NewServerReflectionClient(without).ServerReflectionInfo(ctx)
	if err != nil {
		t.Fatal(err)
	}
	rs.Send(&reflectpb.ServerReflectionRequest{MessageRequest: &reflectpb.ServerReflectionRequest_ListServices{}})
	rr, err := rs.Recv()
	if err != nil || !strings.Contains(rr.String(), "bunchsieve.v1.RunControl") {
		t.Fatalf("reflection: %v %v", rr, err)
	}

	// Idle: only configuring is allowed; mutating calls need the token.
	st, err := anon.Status(ctx, &pb.StatusRequest{})
	if err != nil || st.Phase != pb.RunPhase_RUN_PHASE_IDLE {
		t.Fatalf("status: %v %v", st, err)
	}
	_, err = anon.Configure(ctx, &pb.ConfigureRequest{})
	wantCode(t, err, codes.Unauthenticated, "configure without token")
	_, err = anon.Start(ctx, &pb.StartRequest{})
	wantCode(t, err, codes.Unauthenticated, "start without token")
	_, err = c.Start(ctx, &pb.StartRequest{})
	wantCode(t, err, codes.FailedPrecondition, "start while idle")
	_, err = c.Stop(ctx, &pb.StopRequest{})
	wantCode(t, err, codes.FailedPrecondition, "stop while idle")
	_, err = c.SetPrescaleSet(ctx, &pb.SetPrescaleSetRequest{PrescaleSet: "quiet"})
	wantCode(t, err, codes.FailedPrecondition, "prescale set while idle")
	_, err = c.Configure(ctx, &pb.ConfigureRequest{Menu: "menu: broken\nrules: {"})
	wantCode(t, err, codes.InvalidArgument, "configure with a broken menu")

	st, err = c.Configure(ctx, &pb.ConfigureRequest{Run: 42, Seed: 7})
	if err != nil || st.Phase != pb.RunPhase_RUN_PHASE_READY || st.Run != 42 || st.PrescaleSet != "" && st.PrescaleSet != "nominal" {
		t.Fatalf("configure: %v %v", st, err)
	}
	_, err = c.SetPrescaleSet(ctx, &pb.SetPrescaleSetRequest{PrescaleSet: "no-such-set"})
	wantCode(t, err, codes.InvalidArgument, "unknown prescale set")

	// Start; while flowing, configure and start are refused.
	if st, err = c.Start(ctx, &pb.StartRequest{}); err != nil || st.Phase != pb.RunPhase_RUN_PHASE_FLOWING {
		t.Fatalf("start: %v %v", st, err)
	}
	_, err = c.Start(ctx, &pb.StartRequest{})
	wantCode(t, err, codes.FailedPrecondition, "start while flowing")
	_, err = c.Configure(ctx, &pb.ConfigureRequest{})
	wantCode(t, err, codes.FailedPrecondition, "configure while flowing")
	hash0 := st.MenuHash

	// Live rates arrive and show the rules.
	ws, err := anon.WatchRates(ctx, &pb.WatchRatesRequest{IntervalMs: 200})
	if err != nil {
		t.Fatal(err)
	}
	var sawRate bool
	for i := 0; i < 30 && !sawRate; i++ {
		up, err := ws.Recv()
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range up.Rules {
			sawRate = sawRate || (r.Rule == "random-keep" && r.AcceptedHz > 0)
		}
	}
	if !sawRate {
		t.Fatal("no live rate for random-keep")
	}

	// Switch prescale set: it waits for the next lumi slice, then holds.
	if st, err = c.SetPrescaleSet(ctx, &pb.SetPrescaleSetRequest{PrescaleSet: "quiet"}); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(60 * time.Second)
	for st.PrescaleSet != "quiet" {
		if time.Now().After(deadline) {
			t.Fatalf("prescale set never switched: %v", st)
		}
		time.Sleep(20 * time.Millisecond)
		st, _ = c.Status(ctx, &pb.StatusRequest{})
	}

	// Load a new menu (a tighter MET rule): validated, then it takes over
	// at the next lumi slice boundary, in the set the operator chose.
	data, _ := fs.ReadFile(examples.FS, examples.StarterMenu)
	next := strings.Replace(string(data), "met > 120 GeV", "met > 150 GeV", 1)
	_, err = c.LoadMenu(ctx, &pb.LoadMenuRequest{Menu: "menu: x\nversion: 1\nrules:\n  r: {when: \"met > 1 m\"}\n"})
	wantCode(t, err, codes.InvalidArgument, "menu with a wrong unit")
	if st, err = c.LoadMenu(ctx, &pb.LoadMenuRequest{Menu: next}); err != nil {
		t.Fatal(err)
	}
	for st.MenuHash == hash0 {
		if time.Now().After(deadline.Add(30 * time.Second)) {
			t.Fatalf("menu never switched: %v", st)
		}
		time.Sleep(20 * time.Millisecond)
		st, _ = c.Status(ctx, &pb.StatusRequest{})
	}
	if st.PrescaleSet != "quiet" {
		t.Fatalf("the new menu took set %q, want the chosen %q", st.PrescaleSet, "quiet")
	}

	// A set chosen while a new menu waits is the new menu's: one it lacks
	// is refused, one it has goes in with it.
	tiny := "menu: tiny\nversion: 1\nrules:\n  met-50: {when: \"met > 50 GeV\"}\nprescale_sets:\n  calm: {met-50: 3}\n"
	if st, err = c.LoadMenu(ctx, &pb.LoadMenuRequest{Menu: tiny}); err != nil {
		t.Fatal(err)
	}
	hash1 := st.MenuHash
	_, err = c.SetPrescaleSet(ctx, &pb.SetPrescaleSetRequest{PrescaleSet: "quiet"})
	wantCode(t, err, codes.InvalidArgument, "a set the waiting menu lacks")
	if _, err = c.SetPrescaleSet(ctx, &pb.SetPrescaleSetRequest{PrescaleSet: "calm"}); err != nil {
		t.Fatalf("the waiting menu's set: %v", err)
	}
	for st.MenuName != "tiny" {
		if time.Now().After(deadline.Add(60 * time.Second)) {
			t.Fatalf("tiny never switched in: %v (was %s)", st, hash1)
		}
		time.Sleep(20 * time.Millisecond)
		st, _ = c.Status(ctx, &pb.StatusRequest{})
	}
	if st.PrescaleSet != "calm" || st.UptimeS <= 0 {
		t.Fatalf("after the switch: set %q, uptime %v s; want calm and the run's time", st.PrescaleSet, st.UptimeS)
	}

	// Stop drains, then the run is over and the run number moves on.
	if st, err = c.Stop(ctx, &pb.StopRequest{}); err != nil {
		t.Fatal(err)
	}
	_, err = c.Stop(ctx, &pb.StopRequest{})
	if err != nil {
		wantCode(t, err, codes.FailedPrecondition, "stop while draining")
	}
	st = waitPhase(t, c, pb.RunPhase_RUN_PHASE_READY)
	if st.Run != 43 || st.Crossings == 0 || st.EventsBuilt != st.Crossings {
		t.Fatalf("after stop: %v", st)
	}

	// Configuring again keeps what the request leaves out: the next run
	// number, the menu and its set; a duration must be a real one.
	if st, err = c.Configure(ctx, &pb.ConfigureRequest{RateHz: 15000}); err != nil {
		t.Fatal(err)
	}
	if st.Run != 43 || st.MenuName != "tiny" || st.PrescaleSet != "calm" || st.UptimeS != 0 {
		t.Fatalf("configure after a run: %v; want run 43, menu tiny, set calm, no uptime", st)
	}
	for _, d := range []float64{math.NaN(), math.Inf(1), 1e300, -1} {
		_, err = c.Configure(ctx, &pb.ConfigureRequest{DurationS: d})
		wantCode(t, err, codes.InvalidArgument, fmt.Sprintf("duration %g s", d))
	}
}

// The token's scheme is matched without regard to case (RFC 7235,
// section 2.1), and the token itself exactly.
func TestBearerSchemeAnyCase(t *testing.T) {
	a := &auth{token: []byte(token)}
	method := pb.RunControl_Start_FullMethodName
	for _, tc := range []struct {
		header string
		ok     bool
	}{{"Bearer " + token, true}, {"bearer " + token, true}, {"BEARER " + token, true},
		{"Bearer " + token + "x", false}, {"Basic " + token, false}, {token, false}, {"Bearer", false}} {
		ctx := metadata.NewIncomingContext(context.Background(), metadata.Pairs("authorization", tc.header))
		if err := a.check(ctx, method); (err == nil) != tc.ok {
			t.Errorf("authorization %q: %v, want accepted %v", tc.header, err, tc.ok)
		}
	}
}
