package data

import (
	"context"
	"errors"
	"strings"
	"testing"
)

func TestEncodeKnown(t *testing.T) {
	v, err := LearnVocab(context.Background(), strings.NewReader("abc abc\n"), "x", VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		t.Fatal(err)
	}
	ids, err := v.EncodeKnown(context.Background(), "cab", "prompt", false)
	if err != nil || v.Decode(ids) != "cab" {
		t.Fatalf("got %v %v", ids, err)
	}
	_, err = v.EncodeKnown(context.Background(), "zax yz", "prompt", false)
	var ue *UnknownPiecesError
	if !errors.As(err, &ue) || !strings.Contains(err.Error(), `prompt has 3 characters outside the model's vocabulary: "z", "x", "y"`) {
		t.Errorf("got %v, want the unknown characters listed once each, in order", err)
	}
	ids, err = v.EncodeKnown(context.Background(), "zax", "prompt", true)
	if err != nil || len(ids) != 3 || ids[0] != v.Unknown() || ids[2] != v.Unknown() {
		t.Errorf("mapped: got %v %v", ids, err)
	}
}
