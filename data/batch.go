package data

// Batch is one training window: B parallel streams over the training tokens,
// each advanced by T steps. Tokens are stored time-major, so that the B
// tokens of step t are contiguous: the token of stream b at step t is
// Inputs[t*B+b], and Targets[t*B+b] is the token that follows it in the
// stream.
type Batch struct {
	B, T    int
	Inputs  []int
	Targets []int
}
