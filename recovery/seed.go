package recovery

import (
	"crypto/sha256"
	"encoding/binary"
	"math/rand/v2"
	"strconv"
)

// streamRand returns a generator for one named stream. Its seed is the
// SHA-256 of the study seed and the stream's path (design, generator,
// participant, purpose), so a draw never depends on which worker makes it
// or in which order.
func streamRand(seed uint64, path ...string) *rand.Rand {
	h := sha256.New()
	var b [8]byte
	binary.LittleEndian.PutUint64(b[:], seed)
	h.Write(b[:])
	for _, p := range path {
		h.Write([]byte(strconv.Itoa(len(p))))
		h.Write([]byte{':'})
		h.Write([]byte(p))
	}
	sum := h.Sum(nil)
	return rand.New(rand.NewPCG(binary.LittleEndian.Uint64(sum[:8]), binary.LittleEndian.Uint64(sum[8:16])))
}

// uniform01 draws from the open interval (0, 1), for quantile sampling.
func uniform01(r *rand.Rand) float64 {
	for {
		u := r.Float64()
		if u > 0 {
			return u
		}
	}
}
