package onnx

import (
	"encoding/binary"
	"fmt"
	"math"

	"google.golang.org/protobuf/proto"

	pb "weft/checkpoint/onnx/onnxpb"
)

// builder accumulates the nodes, initializers and value names of one
// graph. Value names made by tmp are numbered in the order of creation,
// so the same model always gives the same graph, byte for byte.
type builder struct {
	g    *pb.GraphProto
	next int
}

// tmp returns a new value name starting with what.
func (b *builder) tmp(what string) string {
	b.next++
	return fmt.Sprintf("%s_%d", what, b.next)
}

// op adds a node of type op with the given inputs and one output, and
// returns the output's name.
func (b *builder) op(op string, in []string, attrs ...*pb.AttributeProto) string {
	return b.opN(op, in, 1, attrs...)[0]
}

// opN adds a node with n outputs and returns their names.
func (b *builder) opN(op string, in []string, n int, attrs ...*pb.AttributeProto) []string {
	out := make([]string, n)
	for i := range out {
		out[i] = b.tmp(op)
	}
	b.node(op, in, out, attrs...)
	return append([]string(nil), out...) // the node keeps its own slice
}

// node adds a node with named outputs.
func (b *builder) node(op string, in, out []string, attrs ...*pb.AttributeProto) {
	b.g.Node = append(b.g.Node, &pb.NodeProto{
		Name:      proto.String(fmt.Sprintf("node%d", len(b.g.Node))),
		OpType:    proto.String(op),
		Input:     append([]string(nil), in...),
		Output:    append([]string(nil), out...),
		Attribute: attrs,
	})
}

// floats adds a float32 initializer (raw little-endian data, row-major).
func (b *builder) floats(name string, dims []int64, v []float32) string {
	checkCount(name, dims, len(v))
	raw := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(raw[4*i:], math.Float32bits(x))
	}
	b.g.Initializer = append(b.g.Initializer, &pb.TensorProto{
		Name:     proto.String(name),
		Dims:     dims,
		DataType: proto.Int32(int32(pb.TensorProto_FLOAT)),
		RawData:  raw,
	})
	return name
}

// ints adds an int64 initializer.
func (b *builder) ints(name string, dims []int64, v ...int64) string {
	checkCount(name, dims, len(v))
	raw := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(raw[8*i:], uint64(x))
	}
	b.g.Initializer = append(b.g.Initializer, &pb.TensorProto{
		Name:     proto.String(name),
		Dims:     dims,
		DataType: proto.Int32(int32(pb.TensorProto_INT64)),
		RawData:  raw,
	})
	return name
}

// vector adds a one-dimensional int64 constant.
func (b *builder) vector(what string, v ...int64) string {
	return b.ints(b.tmp(what), []int64{int64(len(v))}, v...)
}

func checkCount(name string, dims []int64, n int) {
	want := int64(1)
	for _, d := range dims {
		want *= d
	}
	if want != int64(n) {
		panic(fmt.Sprintf("onnx: initializer %s: %d values for dims %v", name, n, dims))
	}
}

// A dim is one dimension of a graph input or output: a fixed size, or a
// symbolic name such as "batch".
type dim struct {
	size  int64
	param string
}

func fixed(n int) dim          { return dim{size: int64(n)} }
func symbolic(name string) dim { return dim{param: name} }

// valueInfo describes a tensor of element type t and the given dims.
func valueInfo(name, doc string, t pb.TensorProto_DataType, dims ...dim) *pb.ValueInfoProto {
	shape := &pb.TensorShapeProto{}
	for _, d := range dims {
		if d.param != "" {
			shape.Dim = append(shape.Dim, &pb.TensorShapeProto_Dimension{Value: &pb.TensorShapeProto_Dimension_DimParam{DimParam: d.param}})
		} else {
			shape.Dim = append(shape.Dim, &pb.TensorShapeProto_Dimension{Value: &pb.TensorShapeProto_Dimension_DimValue{DimValue: d.size}})
		}
	}
	return &pb.ValueInfoProto{
		Name:      proto.String(name),
		DocString: proto.String(doc),
		Type: &pb.TypeProto{Value: &pb.TypeProto_TensorType{TensorType: &pb.TypeProto_Tensor{
			ElemType: proto.Int32(int32(t)),
			Shape:    shape,
		}}},
	}
}

func attrInt(name string, v int64) *pb.AttributeProto {
	return &pb.AttributeProto{Name: proto.String(name), Type: pb.AttributeProto_INT.Enum(), I: proto.Int64(v)}
}

func attrInts(name string, v ...int64) *pb.AttributeProto {
	return &pb.AttributeProto{Name: proto.String(name), Type: pb.AttributeProto_INTS.Enum(), Ints: v}
}

func attrStrings(name string, v ...string) *pb.AttributeProto {
	s := make([][]byte, len(v))
	for i, x := range v {
		s[i] = []byte(x)
	}
	return &pb.AttributeProto{Name: proto.String(name), Type: pb.AttributeProto_STRINGS.Enum(), Strings: s}
}
