// filtertwin preview window: a small line plot on a canvas (log frequency axis).
// Our own code, no library; see LICENSE.txt.
"use strict";

const Plot = (() => {
  const PAD = { left: 48, right: 12, top: 10, bottom: 26 };

  function niceStep(span, target) {
    const raw = span / target;
    const power = Math.pow(10, Math.floor(Math.log10(raw)));
    for (const m of [1, 2, 5, 10]) if (m * power >= raw) return m * power;
    return 10 * power;
  }

  function freqLabel(f) {
    return f >= 1000 ? (f / 1000) + "k" : String(f);
  }

  // draw(canvas, {xMin, xMax, yMin, yMax, yUnit, yLabel, series: [{x, y, color, width, dash}],
  //              bands: [{x, lo, hi, color}]})
  function draw(canvas, spec) {
    const ratio = window.devicePixelRatio || 1;
    const cssWidth = canvas.clientWidth || canvas.width;
    const cssHeight = Math.round(cssWidth * canvas.height / canvas.width) || canvas.height;
    if (canvas._w !== cssWidth * ratio) {
      canvas._w = cssWidth * ratio;
      canvas.width = cssWidth * ratio;
      canvas.height = cssHeight * ratio;
      canvas.style.height = cssHeight + "px";
    }
    const ctx = canvas.getContext("2d");
    const w = canvas.width / ratio, h = canvas.height / ratio;
    const lx0 = Math.log10(spec.xMin), lx1 = Math.log10(spec.xMax);
    const X = f => PAD.left + (Math.log10(f) - lx0) / (lx1 - lx0) * (w - PAD.left - PAD.right);
    const Y = v => PAD.top + (spec.yMax - v) / (spec.yMax - spec.yMin) * (h - PAD.top - PAD.bottom);
    const gridKey = [canvas.width, canvas.height, spec.xMin, spec.xMax, spec.yMin, spec.yMax, spec.yLabel].join();
    if (canvas._gridKey !== gridKey) {
      canvas._grid = document.createElement("canvas");
      canvas._grid.width = canvas.width;
      canvas._grid.height = canvas.height;
      const g = canvas._grid.getContext("2d");
      g.setTransform(ratio, 0, 0, ratio, 0, 0);
      drawGrid(g, w, h, spec, X, Y, lx0);
      canvas._gridKey = gridKey;
    }
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.clearRect(0, 0, canvas.width, canvas.height);
    ctx.drawImage(canvas._grid, 0, 0);
    ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
    drawData(ctx, w, h, spec, X, Y);
  }

  function drawGrid(ctx, w, h, spec, X, Y, lx0) {
    ctx.font = "11px system-ui, sans-serif";
    ctx.strokeStyle = "#e4e0d8";
    ctx.fillStyle = "#69707a";
    ctx.lineWidth = 1;
    for (let d = Math.pow(10, Math.floor(lx0)); d <= spec.xMax; d *= 10) {
      for (const m of [1, 2, 5]) {
        const f = d * m;
        if (f < spec.xMin || f > spec.xMax) continue;
        ctx.beginPath(); ctx.moveTo(X(f), PAD.top); ctx.lineTo(X(f), h - PAD.bottom); ctx.stroke();
        ctx.textAlign = "center";
        ctx.fillText(freqLabel(f), X(f), h - PAD.bottom + 14);
      }
    }
    const step = niceStep(spec.yMax - spec.yMin, 6);
    ctx.textAlign = "right";
    for (let v = Math.ceil(spec.yMin / step) * step; v <= spec.yMax + 1e-9; v += step) {
      ctx.beginPath(); ctx.moveTo(PAD.left, Y(v)); ctx.lineTo(w - PAD.right, Y(v)); ctx.stroke();
      ctx.fillText(Number(v.toPrecision(6)) + (spec.yUnit || ""), PAD.left - 4, Y(v) + 4);
    }
    if (spec.yLabel) {  // the y axis's unit, written up the left edge
      ctx.save();
      ctx.translate(9, (PAD.top + h - PAD.bottom) / 2);
      ctx.rotate(-Math.PI / 2);
      ctx.textAlign = "center";
      ctx.fillText(spec.yLabel, 0, 0);
      ctx.restore();
    }
    ctx.strokeStyle = "#c9c3b8";
    ctx.strokeRect(PAD.left, PAD.top, w - PAD.left - PAD.right, h - PAD.top - PAD.bottom);
  }

  function drawData(ctx, w, h, spec, X, Y) {
    ctx.save();
    ctx.beginPath();
    ctx.rect(PAD.left, PAD.top, w - PAD.left - PAD.right, h - PAD.top - PAD.bottom);
    ctx.clip();
    for (const band of spec.bands || []) {
      ctx.fillStyle = band.color;
      ctx.beginPath();
      band.x.forEach((f, i) => { const p = [X(f), Y(band.hi[i])]; i ? ctx.lineTo(...p) : ctx.moveTo(...p); });
      for (let i = band.x.length - 1; i >= 0; i--) ctx.lineTo(X(band.x[i]), Y(band.lo[i]));
      ctx.closePath();
      ctx.fill();
    }
    for (const s of spec.series) {
      ctx.strokeStyle = s.color;
      ctx.lineWidth = s.width || 1.5;
      ctx.setLineDash(s.dash || []);
      ctx.beginPath();
      let pen = false;
      s.x.forEach((f, i) => {
        const v = s.y[i];
        if (v === null || v === undefined || !isFinite(v) || f <= 0) { pen = false; return; }
        const p = [X(f), Y(Math.max(spec.yMin - 10, Math.min(spec.yMax + 10, v)))];
        if (pen) ctx.lineTo(...p); else ctx.moveTo(...p);
        pen = true;
      });
      ctx.stroke();
    }
    ctx.restore();
    ctx.setLineDash([]);
  }

  return { draw };
})();
