// Test RTL (invented for the edopt tests): an N-bit adder with carry in and carry out, built
// from a full-adder module so that a synthesis run without flattening keeps the hierarchy.
module full_adder (input a, input b, input ci, output s, output co);
  assign s = a ^ b ^ ci;
  assign co = (a & b) | (ci & (a ^ b));
endmodule

module adder #(parameter N = 8) (
  input  [N-1:0] a,
  input  [N-1:0] b,
  input          ci,
  output [N-1:0] s,
  output         co
);
  wire [N:0] c;
  assign c[0] = ci;
  genvar i;
  generate
    for (i = 0; i < N; i = i + 1) begin : bit
      full_adder fa (.a(a[i]), .b(b[i]), .ci(c[i]), .s(s[i]), .co(c[i + 1]));
    end
  endgenerate
  assign co = c[N];
endmodule

// The same sum written as one arithmetic expression, for a flat synthesis run.
module adder_flat #(parameter N = 8) (
  input  [N-1:0] a,
  input  [N-1:0] b,
  input          ci,
  output [N-1:0] s,
  output         co
);
  assign {co, s} = a + b + ci;
endmodule
