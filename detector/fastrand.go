package detector

import (
	"math"
	"math/bits"
)

// fastRand is the generator of the physics generators' per-crossing
// streams: xoshiro256** (D. Blackman, S. Vigna, "Scrambled linear
// pseudorandom number generators", ACM TOMS 47 (2021) 36) seeded through
// splitmix64. It is a rand.Source, so a rand.Rand can wrap it, and its own
// normal sampler runs inline in the readout loop, where the calls through
// rand.Rand cost more than the arithmetic. It is not safe for concurrent
// use.
type fastRand struct {
	s0, s1, s2, s3 uint64
	spare          uint32 // the unused half of the last 64-bit draw
	haveSpare      bool
}

// seed sets the state from two words, as a function of them only. For a
// fixed a, distinct b give distinct starting points (mix64 is a bijection),
// none a few steps along another's splitmix64 sequence.
func (f *fastRand) seed(a, b uint64) {
	x := mix64(a) ^ mix64(b^0x6a09e667f3bcc909)
	next := func() uint64 {
		x += 0x9e3779b97f4a7c15
		return mix64(x)
	}
	f.s0, f.s1, f.s2, f.s3 = next(), next(), next(), next()
	f.haveSpare = false
}

// mix64 is the splitmix64 output function, a bijection of 64-bit words.
func mix64(z uint64) uint64 {
	z = (z ^ z>>30) * 0xbf58476d1ce4e5b9
	z = (z ^ z>>27) * 0x94d049bb133111eb
	return z ^ z>>31
}

// Uint64 returns 64 random bits.
func (f *fastRand) Uint64() uint64 {
	r := bits.RotateLeft64(f.s1*5, 7) * 9
	t := f.s1 << 17
	f.s2 ^= f.s0
	f.s3 ^= f.s1
	f.s1 ^= f.s2
	f.s0 ^= f.s3
	f.s2 ^= t
	f.s3 = bits.RotateLeft64(f.s3, 45)
	return r
}

// uint32 returns 32 random bits, using both halves of each 64-bit draw.
func (f *fastRand) uint32() uint32 {
	if f.haveSpare {
		f.haveSpare = false
		return f.spare
	}
	u := f.Uint64()
	f.spare, f.haveSpare = uint32(u>>32), true
	return uint32(u)
}

// float64 returns a uniform variate in [0, 1) with 53 random bits.
func (f *fastRand) float64() float64 { return float64(f.Uint64()>>11) * 0x1p-53 }

// Ziggurat tables for the standard normal with 128 layers (G. Marsaglia,
// W.W. Tsang, "The ziggurat method for generating random variables", J.
// Stat. Softw. 5 (2000) 8), computed as in their setup routine. A sample
// takes 32 random bits: 7 pick the layer and the other 25 give a signed
// position in it, so that layer and position never share bits (the flaw
// J.A. Doornik, "An improved ziggurat method", 2005, found in the original).
const (
	zigR     = 3.442619855899
	zigScale = 1 << 24 // |position| < 2^24
)

var zigK, zigW, zigF = func() (k [128]int32, w, f [128]float64) {
	const vn = 9.91256303526217e-3
	dn, tn := zigR, zigR
	q := vn / math.Exp(-0.5*dn*dn)
	k[0] = int32(dn / q * zigScale)
	k[1] = 0
	w[0] = q / zigScale
	w[127] = dn / zigScale
	f[0] = 1
	f[127] = math.Exp(-0.5 * dn * dn)
	for i := 126; i >= 1; i-- {
		dn = math.Sqrt(-2 * math.Log(vn/dn+math.Exp(-0.5*dn*dn)))
		k[i+1] = int32(dn / tn * zigScale)
		tn = dn
		f[i] = math.Exp(-0.5 * dn * dn)
		w[i] = dn / zigScale
	}
	return
}()

// norm returns a standard normal variate by the ziggurat method, from 32
// random bits in about 98% of calls.
func (f *fastRand) norm() float64 {
	u := f.uint32()
	hz, iz := int32(u)>>7, u&127
	if a := hz ^ hz>>31 - hz>>31; a < zigK[iz] {
		return float64(hz) * zigW[iz]
	}
	return f.normSlow(hz, iz)
}

// normSlow handles the wedges and the tail of the ziggurat.
func (f *fastRand) normSlow(hz int32, iz uint32) float64 {
	for {
		x := float64(hz) * zigW[iz]
		if iz == 0 {
			// The tail beyond r, by Marsaglia's method.
			for {
				x = -math.Log(1-f.float64()) / zigR
				y := -math.Log(1 - f.float64())
				if y+y >= x*x {
					break
				}
			}
			if hz > 0 {
				return zigR + x
			}
			return -zigR - x
		}
		if zigF[iz]+f.float64()*(zigF[iz-1]-zigF[iz]) < math.Exp(-0.5*x*x) {
			return x
		}
		u := f.uint32()
		hz, iz = int32(u)>>7, u&127
		if a := hz ^ hz>>31 - hz>>31; a < zigK[iz] {
			return float64(hz) * zigW[iz]
		}
	}
}
