/**
 * The payload schema, embedded so the bundled package needs no file at run time. It must equal
 * formats/tendon.proto byte for byte (test/format/schema.test.ts checks); edit the .proto, then
 * paste it here between the backticks (it must hold no backtick, backslash or dollar-brace).
 */
export const TENDON_SCHEMA = `// tendon model file payload, format 1.x. FORMAT.md beside this file is the byte-level spec:
// a 16-byte header (magic "TNDN", version, payload length, CRC-32) precedes this message.
// Rules for changing it: a new MINOR version may only add fields with new numbers (readers of
// the same major skip what they do not know); anything else is a new MAJOR version.
syntax = "proto3";

package tendon.file.v1;

// The whole payload: one TendonModel message.
message TendonModel {
  // Width of one input row (number of raw features). At least 1.
  uint32 inputs = 1;
  // Feature names; empty means "none given", otherwise exactly "inputs" names.
  repeated string feature_names = 2;
  // Output labels; empty means "none given", otherwise one per output of the last layer.
  repeated string output_labels = 3;
  // Input normalisation applied before the first layer; neither set means "none".
  oneof input_scaling {
    ZScoreStats zscore = 4;
    MinMaxStats minmax = 5;
  }
  // Layers in execution order. At least one.
  repeated LayerEntry layers = 6;
  ModelInfo info = 7;
  // Oldest first: the files this model was derived from.
  repeated LineageStep lineage = 8;
}

// Per-feature z-score statistics (float64). All three arrays empty = not yet fitted.
message ZScoreStats {
  repeated double mean = 1;
  // Population standard deviation, each > 0.
  repeated double std = 2;
  // Sum of squared deviations from the mean (Welford's M2), each >= 0.
  repeated double m2 = 3;
  // Rows seen so far.
  uint64 count = 4;
}

// Per-feature minimum and maximum (float64). Both arrays empty = not yet fitted.
message MinMaxStats {
  repeated double min = 1;
  repeated double max = 2;
  // Rows seen so far.
  uint64 count = 3;
}

message LayerEntry {
  // Exactly one is set.
  oneof kind {
    DenseParams dense = 1;
    BatchNormParams batchnorm = 2;
    DropoutParams dropout = 3;
  }
}

enum Activation {
  ACTIVATION_UNSET = 0;
  ACTIVATION_LINEAR = 1;
  ACTIVATION_RELU = 2;
  ACTIVATION_LEAKY_RELU = 3;
  ACTIVATION_SIGMOID = 4;
  ACTIVATION_TANH = 5;
  ACTIVATION_SOFTPLUS = 6;
  ACTIVATION_SOFTMAX = 7;
}

// y = activation(x . W + b), W of shape [inputs, size].
message DenseParams {
  uint32 size = 1;
  Activation activation = 2;
  // Slope for negative inputs; read by leaky ReLU only.
  double alpha = 3;
  // Shape [in_width, size]; F32, F16 or I8.
  Tensor weight = 4;
  // Shape [size].
  Tensor bias = 5;
}

// y = gamma * (x - running_mean) / sqrt(running_variance + epsilon) + beta at inference.
message BatchNormParams {
  // Each of shape [width], width = the incoming width.
  Tensor gamma = 1;
  Tensor beta = 2;
  Tensor running_mean = 3;
  Tensor running_variance = 4;
  // > 0.
  double epsilon = 5;
  // Weight of the old running statistic on a training update, in [0, 1].
  double momentum = 6;
}

message DropoutParams {
  // In [0, 1). Identity at inference.
  double rate = 1;
}

enum DType {
  DTYPE_UNSET = 0;
  // IEEE 754 binary32, 4 bytes per element, little-endian.
  DTYPE_F32 = 1;
  // IEEE 754 binary16, 2 bytes per element, little-endian.
  DTYPE_F16 = 2;
  // Signed 8-bit integer, 1 byte per element, with one float32 scale per column.
  DTYPE_I8 = 3;
}

message Tensor {
  DType dtype = 1;
  // Dimensions, outermost first; data is row-major (last index fastest).
  repeated uint32 shape = 2;
  // Exactly element_size(dtype) * product(shape) bytes.
  bytes data = 3;
  // DTYPE_I8 only: one scale per column (last dimension); value = q * scale.
  repeated float scales = 4;
}

message ModelInfo {
  string name = 1;
  string description = 2;
  // ISO 8601 time of creation.
  string created = 3;
  map<string, string> extra = 4;
}

message LineageStep {
  // CRC-32 of the parent file's payload, 8 lowercase hex digits.
  string checksum = 1;
  // Where the parent was read from, as given.
  string source = 2;
  // What was done to it, worded to read "ACTION from SOURCE", e.g. "fine-tuned".
  string action = 3;
  // ISO 8601 time.
  string at = 4;
}
`;

/** Fully qualified name of the payload message. */
export const PAYLOAD_MESSAGE = 'tendon.file.v1.TendonModel';
