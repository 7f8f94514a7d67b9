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

// metadata returns the metadata properties (field 14 of ModelProto, each a
// key, field 1, and a value, field 2) of the ONNX file's bytes.
function metadata(b) {
  const meta = {};
  let i = 0;
  const varint = () => { let v = 0, m = 1, x; do { x = b[i++]; v += (x & 127) * m; m *= 128; } while (x & 128); return v; };
  while (i < b.length) {
    const tag = varint();
    if ((tag & 7) === 0) { varint(); continue; } // a number; all else at this level is length-delimited
    const end = varint() + i;
    const entry = {};
    for (; tag >> 3 === 14 && i < end; i += entry.n) { const f = varint() >> 3; entry.n = varint(); entry[f] = b.toString('utf8', i, i + entry.n); }
    if (tag >> 3 === 14) meta[entry[1]] = entry[2];
    i = end;
  }
  return meta;
}
