package builder_test

import (
	"fmt"

	"github.com/bunchsieve/bunchsieve/builder"
	"github.com/bunchsieve/bunchsieve/detector"
	pb "github.com/bunchsieve/bunchsieve/proto/bunchsieve/v1"
)

// Three sources report two crossings; source 3 misses the first one. The
// first leaves, incomplete, once every source is more than the lateness
// past it; the second leaves complete the moment its last fragment comes.
func Example() {
	clk := detector.DefaultClock()
	b, err := builder.New(builder.Config{Run: 1, Sources: []uint32{1, 2, 3}, Lateness: 1000}, func(ev *builder.Event) {
		// ev is valid only here: copy what you keep.
		fmt.Printf("orbit %d bcid %d: %d fragments, missing %v, flags %d\n", ev.Orbit, ev.Bcid, len(ev.Fragments), ev.Missing, ev.Flags)
	})
	if err != nil {
		panic(err)
	}
	add := func(src uint32, bcid uint32, arrival int64) {
		f := &pb.Fragment{SourceId: src, Run: 1, Orbit: 7, Bcid: bcid, TimestampNs: clk.Nominal(7, bcid)}
		f.Seal()
		if err := b.Add(f, arrival, arrival); err != nil {
			fmt.Println(err)
		}
	}
	add(1, 100, 10)
	add(2, 100, 11)
	for _, src := range []uint32{3, 1, 2} {
		add(src, 200, 20) // 100 slots later: 2.5 us, past the lateness
	}
	add(3, 100, 30) // its crossing has left
	// Output:
	// orbit 7 bcid 100: 2 fragments, missing [3], flags 1
	// orbit 7 bcid 200: 3 fragments, missing [], flags 0
	// builder: late fragment from source 3 for crossing orbit 7 bcid 100 at 624966 ns: its event has left or the watermark is past it
}
