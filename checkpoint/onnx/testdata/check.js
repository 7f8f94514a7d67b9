// Test harness of checkpoint/onnx (runtime_test.go): runs an exported model
// in ONNX Runtime on a batch of token id sequences, once over the whole
// sequences and once a token at a time with the state carried, and prints
// every output as JSON:
//   node check.js model.onnx request.json
// request.json: {"rows": B, "tokens": [B·T ids, row-major]}.
const ort = require('onnxruntime-node');
const fs = require('fs');

(async () => {
  const [path, request] = process.argv.slice(2);
  const { rows, tokens } = JSON.parse(fs.readFileSync(request, 'utf8'));
  const T = tokens.length / rows;
  const session = await ort.InferenceSession.create(path, { intraOpNumThreads: 1, interOpNumThreads: 1 });
  const ids = (cols, at) => {
    const a = new BigInt64Array(rows * cols);
    for (let r = 0; r < rows; r++) for (let t = 0; t < cols; t++) a[r * cols + t] = BigInt(tokens[r * T + at + t]);
    return new ort.Tensor('int64', a, [rows, cols]);
  };
  const plain = (out) => Object.fromEntries(Object.entries(out).map(([k, v]) => [k, { dims: v.dims, data: Array.from(v.data) }]));

  // Zero states: the start of a document.
  const states = session.inputNames.filter((n) => n !== 'tokens');
  const zeros = {};
  for (const name of states) {
    const [layers, , hidden] = session.inputMetadata.find((m) => m.name === name).shape;
    zeros[name] = new ort.Tensor('float32', new Float32Array(layers * rows * hidden), [layers, rows, hidden]);
  }

  // One call over the whole sequences.
  const whole = plain(await session.run({ tokens: ids(T, 0), ...zeros }));

  // One token at a time, each call with the states the previous one
  // returned.
  const steps = [];
  let carried = zeros;
  for (let t = 0; t < T; t++) {
    const out = await session.run({ tokens: ids(1, t), ...carried });
    steps.push(plain(out));
    carried = Object.fromEntries(states.map((n) => [n, out[n + '_out']]));
  }
  console.log(JSON.stringify({ inputs: session.inputNames, outputs: session.outputNames, whole, steps }));
})().catch((e) => { console.error(String(e)); process.exit(1); });
