package loadtest

import (
	"os"
	"runtime"
	"runtime/metrics"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"
)

// availableCores spins GOMAXPROCS goroutines for d and returns the CPU
// time they got over d: how much of the machine the process could have
// had, which on a shared machine is less than its processor count.
func availableCores(d time.Duration) float64 {
	u0, s0 := cpuTime()
	start := time.Now()
	var wg sync.WaitGroup
	for range runtime.GOMAXPROCS(0) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			x := uint64(1)
			for time.Since(start) < d {
				for j := 0; j < 1<<14; j++ {
					x = x*6364136223846793005 + 1442695040888963407
				}
			}
			spinSink.Add(x)
		}()
	}
	wg.Wait()
	u1, s1 := cpuTime()
	wall := time.Since(start).Seconds()
	if wall <= 0 {
		return 0
	}
	return (u1 - u0 + s1 - s0).Seconds() / wall
}

// spinSink keeps the spinning loops from being optimised away.
var spinSink atomic.Uint64

// currentRSS returns the resident set now, from /proc/self/statm (its
// second field counts resident pages), or 0 where there is no such file.
func currentRSS() uint64 {
	data, err := os.ReadFile("/proc/self/statm")
	if err != nil {
		return 0
	}
	f := strings.Fields(string(data))
	if len(f) < 2 {
		return 0
	}
	pages, err := strconv.ParseUint(f[1], 10, 64)
	if err != nil {
		return 0
	}
	return pages * uint64(os.Getpagesize())
}

// MemorySample is one reading of the Go runtime's memory.
type MemorySample struct {
	// AtS is the time since the sampler started, in seconds.
	AtS float64 `json:"at_s"`
	// HeapBytes is the memory held by heap objects, live or not yet swept
	// (/memory/classes/heap/objects:bytes).
	HeapBytes uint64 `json:"heap_bytes"`
	// TotalBytes is all memory the runtime has mapped and not released
	// (/memory/classes/total:bytes minus /memory/classes/heap/released:bytes).
	TotalBytes uint64 `json:"total_bytes"`
	// RSSBytes is the process's resident set now (Linux /proc/self/statm;
	// zero elsewhere); MaxRSSBytes its peak so far (getrusage).
	RSSBytes    uint64 `json:"rss_bytes"`
	MaxRSSBytes uint64 `json:"max_rss_bytes"`
}

var memNames = []string{"/memory/classes/heap/objects:bytes", "/memory/classes/total:bytes", "/memory/classes/heap/released:bytes"}

// readMemory takes one MemorySample.
func readMemory(s []metrics.Sample, at time.Duration) MemorySample {
	metrics.Read(s)
	val := func(i int) uint64 {
		if s[i].Value.Kind() == metrics.KindUint64 {
			return s[i].Value.Uint64()
		}
		return 0
	}
	return MemorySample{AtS: at.Seconds(), HeapBytes: val(0), TotalBytes: val(1) - min(val(2), val(1)), RSSBytes: currentRSS(), MaxRSSBytes: maxRSS()}
}

// sampler reads the runtime's memory at a fixed interval until stopped,
// keeping the peaks and, when asked, every sample. Its methods are safe
// for concurrent use.
type sampler struct {
	mu      sync.Mutex
	start   time.Time
	peak    MemorySample
	samples []MemorySample
	keep    bool
	stop    chan struct{}
	done    chan struct{}
}

// startSampler starts sampling every interval; keep keeps the series.
func startSampler(interval time.Duration, keep bool) *sampler {
	s := &sampler{start: time.Now(), keep: keep, stop: make(chan struct{}), done: make(chan struct{})}
	buf := make([]metrics.Sample, len(memNames))
	for i, n := range memNames {
		buf[i].Name = n
	}
	s.add(readMemory(buf, 0))
	go func() {
		defer close(s.done)
		t := time.NewTicker(interval)
		defer t.Stop()
		for {
			select {
			case <-s.stop:
				s.add(readMemory(buf, time.Since(s.start)))
				return
			case <-t.C:
				s.add(readMemory(buf, time.Since(s.start)))
			}
		}
	}()
	return s
}

func (s *sampler) add(m MemorySample) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.peak.HeapBytes = max(s.peak.HeapBytes, m.HeapBytes)
	s.peak.TotalBytes = max(s.peak.TotalBytes, m.TotalBytes)
	s.peak.RSSBytes = max(s.peak.RSSBytes, m.RSSBytes)
	s.peak.MaxRSSBytes = max(s.peak.MaxRSSBytes, m.MaxRSSBytes)
	s.peak.AtS = m.AtS
	if s.keep {
		s.samples = append(s.samples, m)
	}
}

// Stop ends sampling after one last sample and returns the peaks and the
// series. It must be called once.
func (s *sampler) Stop() (peak MemorySample, series []MemorySample) {
	close(s.stop)
	<-s.done
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.peak, s.samples
}
