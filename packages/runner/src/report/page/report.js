/*
 * tilewise report page: draws every figure from its compiled Vega specification (embedded in
 * #tw-figures) with the embedded Vega bundle, as SVG, offline. window.tilewiseReport tells
 * what was drawn: { figures, rendered, failed, done }; <html data-report> becomes "rendered"
 * or "failed" when every figure has been tried.
 */
(function () {
  'use strict';
  var state = { figures: [], rendered: [], failed: [], done: false };
  window.tilewiseReport = state;

  function fail(id, el, e) {
    state.failed.push(id);
    if (el) {
      el.className += ' tw-failed';
      el.textContent = 'This figure could not be drawn: ' + ((e && e.message) || String(e));
    }
    console.error('tilewise report: figure ' + id + ': ' + ((e && e.stack) || String(e)));
  }

  function draw(f) {
    var el = document.getElementById('fig-' + f.id);
    state.figures.push(f.id);
    if (!el) {
      fail(f.id, null, new Error('no container #fig-' + f.id));
      return Promise.resolve();
    }
    try {
      var view = new vega.View(vega.parse(f.spec), { renderer: 'svg', container: el, hover: true, logLevel: vega.Warn });
      return view.runAsync().then(
        function () {
          state.rendered.push(f.id);
        },
        function (e) {
          fail(f.id, el, e);
        }
      );
    } catch (e) {
      fail(f.id, el, e);
      return Promise.resolve();
    }
  }

  var figures;
  try {
    figures = JSON.parse(document.getElementById('tw-figures').textContent);
  } catch (e) {
    fail('(all)', null, e);
    figures = [];
  }
  Promise.all(figures.map(draw)).then(function () {
    state.done = true;
    document.documentElement.setAttribute('data-report', state.failed.length ? 'failed' : 'rendered');
  });
})();
