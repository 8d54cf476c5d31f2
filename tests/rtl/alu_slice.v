// Test RTL (invented for the edopt tests): a 4-bit ALU slice between two register stages.
// Operands and operation are registered; the result and its carry/borrow are registered with
// a synchronous reset.  op: 0 add, 1 and, 2 xor, 3 subtract (a - b, bit 4 = borrow-out mod 32).
module alu_slice (
  input            clk,
  input            rst,
  input      [1:0] op,
  input      [3:0] a,
  input      [3:0] b,
  output reg [3:0] y,
  output reg       c
);
  reg [3:0] ra, rb;
  reg [1:0] rop;
  reg [4:0] r;
  always @(posedge clk) begin
    ra <= a;
    rb <= b;
    rop <= op;
  end
  always @* begin
    case (rop)
      2'd0: r = {1'b0, ra} + {1'b0, rb};
      2'd1: r = {1'b0, ra & rb};
      2'd2: r = {1'b0, ra ^ rb};
      default: r = {1'b0, ra} - {1'b0, rb};
    endcase
  end
  always @(posedge clk) begin
    if (rst) begin
      y <= 4'd0;
      c <= 1'b0;
    end else begin
      y <= r[3:0];
      c <= r[4];
    end
  end
endmodule
