package eval

// table is an open-addressing hash table from 64-bit keys to 32-bit values
// with linear probing. It stores key+1 so that a zero slot is empty; keys
// must therefore be below 2^64-1. It holds far less per entry than a Go map
// (12 bytes a slot at a load of at most 3/4), which matters for the tens of
// millions of n-grams of a long character corpus.
type table struct {
	keys  []uint64
	vals  []int32
	mask  uint64
	shift uint
	n     int
}

func newTable(hint int) *table {
	t := &table{}
	size := 16
	for size*3 < hint*4 {
		size *= 2
	}
	t.init(size)
	return t
}

func (t *table) init(size int) {
	t.keys = make([]uint64, size)
	t.vals = make([]int32, size)
	t.mask = uint64(size - 1)
	t.shift = 64
	for s := size; s > 1; s >>= 1 {
		t.shift--
	}
}

func (t *table) slot(key uint64) uint64 {
	// Fibonacci hashing: the high bits of the product are well mixed.
	return (key * 0x9E3779B97F4A7C15) >> t.shift & t.mask
}

// get returns the value stored for key, or -1.
func (t *table) get(key uint64) int32 {
	k := key + 1
	for i := t.slot(key); ; i = (i + 1) & t.mask {
		switch t.keys[i] {
		case k:
			return t.vals[i]
		case 0:
			return -1
		}
	}
}

// getOrPut returns the value stored for key; when there is none it stores
// val and returns it with added set.
func (t *table) getOrPut(key uint64, val int32) (v int32, added bool) {
	if (t.n+1)*4 > len(t.keys)*3 {
		t.grow()
	}
	k := key + 1
	for i := t.slot(key); ; i = (i + 1) & t.mask {
		switch t.keys[i] {
		case k:
			return t.vals[i], false
		case 0:
			t.keys[i] = k
			t.vals[i] = val
			t.n++
			return val, true
		}
	}
}

func (t *table) grow() {
	keys, vals := t.keys, t.vals
	t.init(2 * len(keys))
	for j, k := range keys {
		if k == 0 {
			continue
		}
		for i := t.slot(k - 1); ; i = (i + 1) & t.mask {
			if t.keys[i] == 0 {
				t.keys[i] = k
				t.vals[i] = vals[j]
				break
			}
		}
	}
}

func (t *table) bytes() int64 { return int64(len(t.keys)) * 12 }

// bytesWith is bytes once the table holds n entries, grown as getOrPut
// grows it.
func (t *table) bytesWith(n int) int64 {
	size := len(t.keys)
	for n*4 > size*3 {
		size *= 2
	}
	return int64(size) * 12
}
