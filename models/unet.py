"""U-Net definitions shared by models/train.py and tests/ref/neural_models.py.

U-Net: Ronneberger O., Fischer P., Brox T. (2015) U-Net: convolutional networks for biomedical
image segmentation. MICCAI, LNCS 9351:234-241. Encoder of Conv-BN-ReLU x2 per level with max
pooling, decoder of 2x2 transposed convolutions (stride 2) with skip concatenation, 1x1 head.
The transposed-convolution decoder is chosen because OpenCV dnn runs it fast (see
models/ENGINES.md); 3D models go through LibTorch (OpenCV 4.6 refuses
ConvTranspose3d). Padding is 'same', so the output has the input's size when every spatial size
is a multiple of 2**(levels-1).

separable=True (2D only) makes every 3x3 convolution but the network's first a depthwise-separable
one: a 3x3 convolution per channel (groups = channels) followed by a 1x1 convolution across
channels (Chollet F. (2017) Xception: deep learning with depthwise separable convolutions. CVPR,
1251-1258), then BN and ReLU as before. OpenCV 4.6 dnn runs a full 3x3 convolution by gathering
each output pixel's 9 x C inputs (measured: that gather is about half its time at 8-32 channels);
its depthwise 3x3 and 1x1 convolutions need no gather, so the shipped models run about 2.5x
faster through OpenCV dnn this way (bench/README.md, issue 13).
"""
import torch
import torch.nn as nn


def _conv3(conv, cin, cout, separable):
    if not separable:
        return [conv(cin, cout, 3, padding=1, bias=False)]
    return [conv(cin, cin, 3, padding=1, groups=cin, bias=False), conv(cin, cout, 1, bias=False)]


def _block(conv, bn, cin, cout, separable=False, first=False):
    """Conv-BN-ReLU x2; with separable, each 3x3 convolution but the network's first (first=True:
    it sees the input slices only) is depthwise 3x3 + pointwise 1x1."""
    return nn.Sequential(*_conv3(conv, cin, cout, separable and not first), bn(cout), nn.ReLU(inplace=True),
                         *_conv3(conv, cout, cout, separable), bn(cout), nn.ReLU(inplace=True))


class UNet(nn.Module):
    """dims = 2 or 3; in_channels = slices of a 2.5D stack (1 for 2D and 3D); sigmoid=True puts the
    sigmoid into the graph (card output.kind = "probability"), else the model returns logits;
    separable=True: depthwise-separable 3x3 convolutions (2D only, see the module's text)."""

    def __init__(self, dims=2, in_channels=1, base=8, levels=3, sigmoid=True, separable=False):
        super().__init__()
        if separable and dims != 2:
            raise ValueError("separable convolutions are for 2D models (3D models run through LibTorch)")
        conv, bn, pool, up = ((nn.Conv2d, nn.BatchNorm2d, nn.MaxPool2d, nn.ConvTranspose2d) if dims == 2 else
                              (nn.Conv3d, nn.BatchNorm3d, nn.MaxPool3d, nn.ConvTranspose3d))
        widths = [base * 2 ** i for i in range(levels)]
        self.down = nn.ModuleList()
        cin = in_channels
        for w in widths:
            self.down.append(_block(conv, bn, cin, w, separable, first=not self.down))
            cin = w
        self.pool = pool(2)
        self.up = nn.ModuleList()
        self.dec = nn.ModuleList()
        for w in reversed(widths[:-1]):
            self.up.append(up(cin, w, 2, stride=2))
            self.dec.append(_block(conv, bn, 2 * w, w, separable))
            cin = w
        self.head = conv(cin, 1, 1)
        self.sigmoid = sigmoid

    def forward(self, x):
        skips = []
        for i, block in enumerate(self.down):
            x = block(x)
            if i + 1 < len(self.down):
                skips.append(x)
                x = self.pool(x)
        for up, dec in zip(self.up, self.dec):
            x = up(x)
            x = dec(torch.cat([x, skips.pop()], dim=1))
        x = self.head(x)
        return torch.sigmoid(x) if self.sigmoid else x


def randomise_batchnorm(model, gen):
    """Random running statistics and affine parameters, so that a test sees BN at work."""
    for m in model.modules():
        if isinstance(m, (nn.BatchNorm2d, nn.BatchNorm3d)):
            n = m.num_features
            m.running_mean.copy_(torch.randn(n, generator=gen) * 0.1)
            m.running_var.copy_(torch.rand(n, generator=gen) * 0.5 + 0.75)
            m.weight.data.copy_(torch.rand(n, generator=gen) * 0.5 + 0.75)
            m.bias.data.copy_(torch.randn(n, generator=gen) * 0.1)


def export_onnx(model, example, path):
    """ONNX opset 11, eval mode (the exporter folds BatchNorm into the convolutions)."""
    model.eval()
    with torch.no_grad():
        torch.onnx.export(model, example, path, opset_version=11, input_names=["input"], output_names=["output"],
                          do_constant_folding=True)


def export_torchscript(model, example, path):
    """Traced and frozen TorchScript (frozen modules run the fast inference path)."""
    model.eval()
    with torch.no_grad():
        traced = torch.jit.trace(model, example)
        frozen = torch.jit.freeze(traced)
        frozen.save(path)
