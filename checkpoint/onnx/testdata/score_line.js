// Prints the surprise, in bits, of one line of text (with its line end) under
// a model that `weft export` wrote for the char tokenizer, scored from the
// start of a document as `weft score` scores a line:
//   node score_line.js model.onnx 'the line to score'
const ort = require('onnxruntime-node');
const fs = require('fs');

(async () => {
  const [path, line] = process.argv.slice(2);
  const vocab = JSON.parse(metadata(fs.readFileSync(path))['weft.vocabulary']);
  const ids = new Map(vocab.entries.map((e, id) => [e.piece, id]));
  if (vocab.boundary === 'line') ids.set('\n', 1);
  const text = (vocab.lowercase ? line.toLowerCase() : line) + '\n';
  const tokens = [...text].map((c) => ids.get(c) ?? 0); // 0: the unknown entry
  const session = await ort.InferenceSession.create(path);
  const feeds = { tokens: new ort.Tensor('int64', BigInt64Array.from(tokens, BigInt), [1, tokens.length]) };
  for (const { name, shape: [layers, , hidden] } of session.inputMetadata.slice(1)) { // state_h (and state_c): zeros
    feeds[name] = new ort.Tensor('float32', new Float32Array(layers * hidden), [layers, 1, hidden]);
  }
  const out = await session.run(feeds);
  const V = vocab.entries.length;
  let nats = out.entry_log_probs.data[tokens[0]]; // ln P(first token | start)
  for (let t = 1; t < tokens.length; t++) nats += out.log_probs.data[(t - 1) * V + tokens[t]];
  console.log((-nats / Math.LN2).toFixed(6));
})();

// metadata reads the metadata properties of an ONNX file from its bytes:
// ModelProto's field 14, entries of a key (field 1) and a value (field 2).
function metadata(b) {
  let i = 0;
  const varint = () => { let v = 0, m = 1, x; do { x = b[i++]; v += (x & 127) * m; m *= 128; } while (x & 128); return v; };
  const meta = {};
  while (i < b.length) {
    const field = varint();
    if ((field & 7) === 0) { varint(); continue; } // a number; the other top-level fields are length-delimited
    const end = varint() + i;
    if (field >> 3 === 14) {
      const kv = [];
      while (i < end) { varint(); const n = varint(); kv.push(b.toString('utf8', i, i + n)); i += n; }
      meta[kv[0]] = kv[1];
    }
    i = end;
  }
  return meta;
}
